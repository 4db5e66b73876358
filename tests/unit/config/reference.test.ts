import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { renderConfigReference, spliceReadmeReference } from '../../../src/config/doc.ts';
import { ConfigSchema } from '../../../src/config/schema.ts';

describe('generated config reference', () => {
  it('the committed docs/config-reference.md matches the schema (run `npx tsx scripts/gen-config-doc.ts` to refresh)', () => {
    const committed = readFileSync(new URL('../../../docs/config-reference.md', import.meta.url), 'utf8');
    expect(committed).toBe(renderConfigReference());
  });

  it('the README carries the same generated reference between its markers', () => {
    const readme = readFileSync(new URL('../../../README.md', import.meta.url), 'utf8');
    expect(readme).toContain('<!-- config-reference:start');
    expect(spliceReadmeReference(readme, renderConfigReference())).toBe(readme);
  });

  it('documents every option: each key of the schema appears with a doc line', () => {
    const text = renderConfigReference();
    const rows = text.split('\n').filter((l) => l.startsWith('| `') || l.startsWith('| **`'));
    for (const r of rows) {
      const meaning = r.split(' | ').at(-1)!.replace(/\|$/, '').trim();
      expect(meaning.length, r).toBeGreaterThan(3);
    }
    for (const key of Object.keys(ConfigSchema.shape)) expect(text).toContain(key === 'defaults' ? '`defaults`' : `\`${key}`);
    for (const key of ['store.influxdb.tokenEnv', 'drift.detector.allowance', 'calendar.holidays.country', 'backtest.every', 'exogenous[].atTarget', 'source.aggregate']) {
      expect(text).toContain(`\`${key}\``);
    }
  });
});
