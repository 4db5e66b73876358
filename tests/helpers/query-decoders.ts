/**
 * Decoders of query text the way the servers' scanners read it, for injection tests: split a
 * query into its skeleton (everything outside string literals, literals replaced by <S>/<I>) and
 * the decoded literal values. Throws where the server's scanner would fail.
 *
 *  - InfluxQL: in '…' strings and "…" identifiers the escapes \\ \' \" \n are decoded, any other
 *    escape is an error and a raw newline ends the token as an error (influxql scanner, ScanString;
 *    from memory; checked against a real influxd in tests/integration/influx-injection.test.ts).
 *  - Flux: in "…" strings the escapes \" \\ \n \r \t \$ are decoded and an unescaped "${" starts
 *    interpolation (Flux language specification, "String literals"; from memory).
 */
export interface Split {
  skeleton: string;
  literals: string[];
}

export function splitInfluxQL(q: string): Split {
  let skeleton = '';
  const literals: string[] = [];
  let i = 0;
  while (i < q.length) {
    const c = q[i]!;
    if (c !== "'" && c !== '"') {
      skeleton += c;
      i++;
      continue;
    }
    let val = '';
    i++;
    for (;;) {
      if (i >= q.length) throw new Error(`unterminated literal in ${q}`);
      const ch = q[i]!;
      if (ch === c) {
        i++;
        break;
      }
      if (ch === '\n') throw new Error('raw newline inside a literal');
      if (ch === '\\') {
        const n = q[i + 1];
        if (n === 'n') val += '\n';
        else if (n === '\\' || n === '"' || n === "'") val += n;
        else throw new Error(`bad escape \\${n}`);
        i += 2;
        continue;
      }
      val += ch;
      i++;
    }
    literals.push(val);
    skeleton += c === "'" ? '<S>' : '<I>';
  }
  return { skeleton, literals };
}

export function splitFlux(q: string): Split {
  let skeleton = '';
  const literals: string[] = [];
  let i = 0;
  while (i < q.length) {
    const c = q[i]!;
    if (c !== '"') {
      skeleton += c;
      i++;
      continue;
    }
    let val = '';
    i++;
    for (;;) {
      if (i >= q.length) throw new Error('unterminated string');
      const ch = q[i]!;
      if (ch === '"') {
        i++;
        break;
      }
      if (ch === '$' && q[i + 1] === '{') throw new Error('interpolation inside a string literal');
      if (ch === '\\') {
        const n = q[i + 1];
        const map: Record<string, string> = { n: '\n', r: '\r', t: '\t', '\\': '\\', '"': '"', $: '$' };
        if (n === undefined || !(n in map)) throw new Error(`bad escape \\${n}`);
        val += map[n];
        i += 2;
        continue;
      }
      val += ch;
      i++;
    }
    literals.push(val);
    skeleton += '<S>';
  }
  return { skeleton, literals };
}

