#!/usr/bin/env node
// Bundles the command line as tsc wrote it (dist/cli/main.js, with its ~150 modules) into one
// file, dist/cli/rowdeck.cjs, writes V8's code cache of it beside (rowdeck.cjs.cache), and writes
// the small entry that runs it from that cache (src/cli/start.ts) as dist/cli/main.cjs, the
// package's bin, and as dist/cli/main.js in place of the unbundled command line.
// Node's module loader took ~0.07 s of every command's start on the ~150 modules here, and
// compiling the one bundle ~0.025 s more; a plan runs many short processes one after another.
// The library (dist/index.js) and the worker entries (dist/workers/) stay as tsc wrote them.
import { chmodSync, copyFileSync, readFileSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { rolldown } from 'rolldown';

const root = join(dirname(fileURLToPath(import.meta.url)), '..');
const cli = join(root, 'dist', 'cli');
const entry = join(cli, 'main.js');
const bundlePath = join(cli, 'rowdeck.cjs');
// Written beside, under the same name (its source map comment names it), then moved into place.
const tmp = join(root, 'dist', '.bundle');
const out = join(tmp, 'rowdeck.cjs');
const bundle = await rolldown({ input: entry, platform: 'node', logLevel: 'warn' });
try {
  // CommonJS, so that it can run from a code cache (vm.Script; Node 20 caches no ES module's
  // code); ASCII (every other character escaped), so V8 keeps it as a one-byte string and reads it
  // without decoding UTF-8; no comments (a sixth of it), as they are in src/.
  await bundle.write({ file: out, format: 'cjs', codeSplitting: false, sourcemap: true, charset: 'ascii', comments: false });
} finally {
  await bundle.close();
}
let text = readFileSync(out, 'latin1');
// The entry's #! line would be a syntax error inside the function the bundle is wrapped in.
if (text.startsWith('#!')) text = `//${text.slice(2)}`;
// The bundle runs as a vm.Script, which has no loader for import(): everything must be required.
if (/\bimport\s*\(/.test(text)) throw new Error('scripts/bundle.mjs: the bundled command line holds an import(); make it a static import');
if (/[^\x00-\x7f]/.test(text)) throw new Error('scripts/bundle.mjs: the bundled command line is not ASCII');
writeFileSync(out, text, 'latin1');
renameSync(out, bundlePath);
renameSync(`${out}.map`, `${bundlePath}.map`);
rmSync(tmp, { recursive: true, force: true });

const { makeCache, cacheFileOf } = await import(join(cli, 'code-cache.js'));
writeFileSync(cacheFileOf(bundlePath), makeCache(bundlePath));

// The entry as CommonJS with code-cache.js inlined, the package's bin: Node starts a CommonJS
// file ~0.013 s sooner than an ES module with its imports (its ES module loader), on every command.
const binPath = join(cli, 'main.cjs');
const start = await rolldown({ input: join(cli, 'start.js'), platform: 'node', logLevel: 'warn' });
try {
  await start.write({ file: join(tmp, 'main.cjs'), format: 'cjs', codeSplitting: false, comments: false });
} finally {
  await start.close();
}
renameSync(join(tmp, 'main.cjs'), binPath);
rmSync(tmp, { recursive: true, force: true });
// The same entry as an ES module where tsc wrote the unbundled command line, so that
// `node dist/cli/main.js` starts as the bin does, but through the ES module loader.
copyFileSync(join(cli, 'start.js'), entry);
rmSync(`${entry}.map`, { force: true });
// Executable files (npm sets the bin's mode when it links it, which in a fresh clone is before
// this build writes the file).
for (const f of [binPath, entry]) chmodSync(f, 0o755);
