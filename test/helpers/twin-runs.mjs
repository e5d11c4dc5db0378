// Runs a list of shuffles and profiles with the built library (dist/) in this process, and prints
// (JSON on stdout) what each wrote: every file's sha256, the manifest without its run section
// (clock readings, thread count) and the profile without its timings; and which kernels this
// process's switches leave on. test/twins.test.ts runs it once with the modules and once with
// every JavaScript twin forced, in a child process each (the switches are read when dist loads).
//   node test/helpers/twin-runs.mjs '{"out": DIR, "cases": [{ "name", "kind": "shuffle"|"profile", "options" }]}'
import { createHash } from 'node:crypto';
import { readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';

const dist = new URL('../../dist/', import.meta.url);
const { shuffle, profile } = await import(new URL('index.js', dist).href);
const { flags } = await import(new URL('flags.js', dist).href);
const { wasmSimdAvailable } = await import(new URL('core/wasm.js', dist).href);
const { gatherKernel } = await import(new URL('engine/gather-kernel.js', dist).href);
const { sortsInWasm } = await import(new URL('core/sort.js', dist).href);
const { StatsKernel } = await import(new URL('core/stats-kernel.js', dist).href);
const { JsonlChecker } = await import(new URL('io/jsonl.js', dist).href);

const { out, cases } = JSON.parse(process.argv[2]);
const sha = (bytes) => createHash('sha256').update(bytes).digest('hex');

const results = {};
for (const c of cases) {
  if (c.kind === 'profile') {
    const { timingsMs: _t, threads: _n, ...p } = await profile(c.options);
    results[c.name] = { profile: sha(JSON.stringify(p)) };
    continue;
  }
  const dir = join(out, c.name);
  const m = await shuffle({ ...c.options, out: dir });
  const files = {};
  for (const f of readdirSync(dir).sort()) if (f !== 'manifest.json') files[f] = sha(readFileSync(join(dir, f)));
  const { run: _run, ...manifest } = m;
  const { run: _r, ...written } = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
  results[c.name] = { files, manifest: sha(JSON.stringify(manifest)), written: sha(JSON.stringify(written)) };
}

console.log(JSON.stringify({
  simd: wasmSimdAvailable(),
  switches: { scan: flags.scan, jsonl: flags.jsonl, spill: flags.spill, gather: flags.gather, sort: flags.sort, stats: flags.stats },
  kernels: {
    jsonl: JsonlChecker.create([]) !== null,
    gather: gatherKernel() !== null,
    sort: sortsInWasm(),
    stats: StatsKernel.create(1) !== null,
  },
  results,
}));
