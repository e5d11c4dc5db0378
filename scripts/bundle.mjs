#!/usr/bin/env node
// Bundles the command line as tsc wrote it (dist/cli/main.js, with its ~150 modules) into one
// file in its place. Node's module loader took ~0.07 s of every command's start on them here, a
// third of a task that finds its work done; a plan runs many short processes. The library
// (dist/index.js) and the worker entries (dist/workers/) stay as tsc wrote them.
import { chmodSync, renameSync, rmSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { rolldown } from 'rolldown';

const root = join(dirname(fileURLToPath(import.meta.url)), '..');
const entry = join(root, 'dist', 'cli', 'main.js');
// Written beside, under the same name (its source map comment names it), then moved into place.
const tmp = join(root, 'dist', '.bundle');
const out = join(tmp, 'main.js');
const bundle = await rolldown({ input: entry, platform: 'node', logLevel: 'warn' });
try {
  await bundle.write({ file: out, format: 'esm', codeSplitting: false, sourcemap: true });
} finally {
  await bundle.close();
}
// An executable file, as the package's bin (npm sets that mode when it links the bin, which in a
// fresh clone is before this build replaces the file).
chmodSync(out, 0o755);
renameSync(out, entry);
renameSync(`${out}.map`, `${entry}.map`);
rmSync(tmp, { recursive: true, force: true });
