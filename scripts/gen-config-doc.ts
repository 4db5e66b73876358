/**
 * Writes docs/config-reference.md from the config schema.
 *   npx tsx scripts/gen-config-doc.ts          write it
 *   npx tsx scripts/gen-config-doc.ts --check  exit 1 when the committed file is stale
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { renderConfigReference } from '../src/config/doc.ts';

export const REFERENCE_PATH = resolve(dirname(fileURLToPath(import.meta.url)), '..', 'docs', 'config-reference.md');

const text = renderConfigReference();
if (process.argv.includes('--check')) {
  let current = '';
  try {
    current = readFileSync(REFERENCE_PATH, 'utf8');
  } catch {
    /* missing counts as stale */
  }
  if (current !== text) {
    console.error(`${REFERENCE_PATH} is stale; run: npx tsx scripts/gen-config-doc.ts`);
    process.exit(1);
  }
  console.log(`${REFERENCE_PATH} is up to date`);
} else {
  writeFileSync(REFERENCE_PATH, text);
  console.log(`wrote ${REFERENCE_PATH}`);
}
