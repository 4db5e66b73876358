/**
 * Writes the config reference from the config schema into docs/config-reference.md and into the
 * README between the `config-reference` markers, so neither can drift from the schema.
 *   npx tsx scripts/gen-config-doc.ts          write both
 *   npx tsx scripts/gen-config-doc.ts --check  exit 1 when either committed copy is stale
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { renderConfigReference, spliceReadmeReference } from '../src/config/doc.ts';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
export const REFERENCE_PATH = resolve(root, 'docs', 'config-reference.md');
export const README_PATH = resolve(root, 'README.md');

function read(p: string): string {
  try {
    return readFileSync(p, 'utf8');
  } catch {
    return ''; // missing counts as stale
  }
}

const text = renderConfigReference();
const readme = read(README_PATH);
const readmeNew = spliceReadmeReference(readme, text);
if (process.argv.includes('--check')) {
  let stale = false;
  if (read(REFERENCE_PATH) !== text) {
    console.error(`${REFERENCE_PATH} is stale; run: npx tsx scripts/gen-config-doc.ts`);
    stale = true;
  }
  if (readmeNew !== readme) {
    console.error(`${README_PATH}: config reference section is stale; run: npx tsx scripts/gen-config-doc.ts`);
    stale = true;
  }
  if (stale) process.exit(1);
  console.log('config reference is up to date (docs and README)');
} else {
  writeFileSync(REFERENCE_PATH, text);
  writeFileSync(README_PATH, readmeNew);
  console.log(`wrote ${REFERENCE_PATH} and the reference section of ${README_PATH}`);
}
