#!/usr/bin/env node
// npm run test:twins: the end-to-end test files once more, with every WebAssembly module's
// JavaScript twin forced (each kernel switch of src/flags.ts set to js), so the twins are tested
// through whole runs as the modules are (`npm test` runs the same files on the modules).
// The unit tests of the kernels compare module and twin directly and are not repeated; --all runs
// the whole suite this way. Needs a build (npm run build; the npm script builds first).
import { spawnSync } from 'node:child_process';
import { existsSync } from 'node:fs';
import { fileURLToPath } from 'node:url';

/** The test files that run whole shuffles, profiles and verifications (library and CLI). */
export const END_TO_END = [
  'test/shuffle.invariants.test.ts',
  'test/shuffle.modes.test.ts',
  'test/shuffle.process.test.ts',
  'test/profile.test.ts',
  'test/verify.test.ts',
  'test/cli.test.ts',
  'test/order.test.ts',
  'test/uniformity.test.ts',
  'test/manifest.schema.test.ts',
  'test/blocks.test.ts',
  'test/jsonl.test.ts',
  'test/kernels.test.ts',
];

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  const root = fileURLToPath(new URL('..', import.meta.url));
  const { FLAG_SPECS } = await import('../dist/flags.js');
  const twins = Object.fromEntries(FLAG_SPECS.filter((s) => s.module).map((s) => [s.name, 'js']));
  const files = process.argv.includes('--all') ? [] : END_TO_END;
  for (const f of files) if (!existsSync(`${root}/${f}`)) throw new Error(`${f}: no such test file (scripts/test-twins.mjs lists it)`);
  console.log(`${Object.entries(twins).map(([k, v]) => `${k}=${v}`).join(' ')} vitest run ${files.length ? `(${files.length} end-to-end files)` : '(all files)'}`);
  const r = spawnSync(process.execPath, [`${root}/node_modules/vitest/vitest.mjs`, 'run', ...files], { cwd: root, stdio: 'inherit', env: { ...process.env, ...twins } });
  process.exit(r.status ?? 1);
}
