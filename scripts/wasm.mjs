#!/usr/bin/env node
// Rebuilds every WebAssembly module of the project (npm run wasm): each script in MODULES writes
// its .wat text and the -wasm.ts file that embeds the module as base64 with its memory layout.
// `node scripts/wasm.mjs --check` writes nothing: it lists the generated files that differ from
// what the scripts make, and exits 1 if there are any (test/wasm.test.ts does the same check).
import { fileURLToPath } from 'node:url';
import { wasm as structural } from './structural-wasm.mjs';
import { wasm as jsonl } from './jsonl-wasm.mjs';
import { wasm as spill } from './spill-wasm.mjs';
import { wasm as gather } from './gather-wasm.mjs';
import { wasm as sort } from './sort-wasm.mjs';
import { wasm as stats } from './stats-wasm.mjs';

/** The six modules, by the name their switch uses (ROWDECK_SCAN for structural: see src/flags.ts). */
export const MODULES = { structural, jsonl, spill, gather, sort, stats };

/** The generated files that differ from what the scripts make (relative paths). */
export async function staleFiles() {
  const out = [];
  for (const m of Object.values(MODULES)) out.push(...(await m.stale()));
  return out;
}

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  if (process.argv.includes('--check')) {
    const stale = await staleFiles();
    for (const path of stale) console.log(`${path}: not what its script makes`);
    if (stale.length > 0) {
      console.log('Run npm run wasm to rebuild the modules (and commit the files).');
      process.exit(1);
    }
    console.log(`the files of all ${Object.keys(MODULES).length} modules are what their scripts make`);
  } else {
    for (const m of Object.values(MODULES)) await m.write();
  }
}
