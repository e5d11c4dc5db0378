/**
 * The WebAssembly modules and their JavaScript twins give the same bytes, end to end: a
 * representative set of runs (CSV with folds, CR LF with named splits and statistics, JSON Lines,
 * JSON Lines with a fold column, groups, hash assignment, spread order, gzip in and out, a
 * quarantine of bad records, and profile) runs in one child process with the modules and in one
 * with every twin forced (ROWDECK_SCAN=js ROWDECK_JSONL=js ROWDECK_SPILL=js ROWDECK_GATHER=js
 * ROWDECK_SORT=js ROWDECK_STATS=js); every file's sha256 and the manifests (their run section
 * aside) must agree. A third child runs a few of them under node --jitless, where there is no
 * WebAssembly at all: the documented fallback gives the same bytes too.
 */
import { spawnSync } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { FLAG_SPECS } from '../src/flags.js';
import { makeSensorCsv, makeTempDir, parseCsv, removeDir } from './helpers/engine.js';

const RUNNER = fileURLToPath(new URL('./helpers/twin-runs.mjs', import.meta.url));
/** The six kernel switches and the value that forces each twin. */
const TWINS = Object.fromEntries(FLAG_SPECS.filter((s) => s.module).map((s) => [s.name, 'js']));

interface Case {
  name: string;
  kind: 'shuffle' | 'profile';
  options: Record<string, unknown>;
}
interface Digest {
  simd: boolean;
  switches: Record<string, string>;
  kernels: Record<string, boolean>;
  results: Record<string, { files?: Record<string, string>; manifest?: string; written?: string; profile?: string }>;
}

let dir: string;
let cases: Case[];

/** Runs `list` in a child process with the environment `env` (every ROWDECK_* switch of the parent left out). */
function runChild(label: string, list: Case[], env: Record<string, string>, nodeArgs: string[] = []): Digest {
  const base = Object.fromEntries(Object.entries(process.env).filter(([k]) => !k.startsWith('ROWDECK_')));
  const r = spawnSync(process.execPath, [...nodeArgs, RUNNER, JSON.stringify({ out: join(dir, label), cases: list })], {
    env: { ...base, ...env }, encoding: 'utf8', maxBuffer: 16 << 20,
  });
  expect(r.status, `${label}: ${r.stderr}`).toBe(0);
  return JSON.parse(r.stdout) as Digest;
}

beforeAll(() => {
  dir = makeTempDir();
  const csvText = makeSensorCsv({ rows: 20000, seed: 21, sensors: 400 });
  const csv = join(dir, 'readings.csv');
  writeFileSync(csv, csvText);
  const crlf = join(dir, 'readings-crlf.csv');
  writeFileSync(crlf, makeSensorCsv({ rows: 8000, seed: 22, crlf: true, noFinalNewline: true }));
  const gz = join(dir, 'readings.csv.gz');
  writeFileSync(gz, gzipSync(csvText));
  // JSON Lines of the same records (numbers as numbers, empty notes as null), a few with extra keys.
  const { header, rows } = parseCsv(csvText);
  const jsonl = join(dir, 'readings.jsonl');
  writeFileSync(jsonl, rows.map((r, i) => {
    const o: Record<string, unknown> = Object.fromEntries(header.map((h, k) => [h, r[k] === '' ? null : r[k]]));
    o.id = Number(o.id);
    o.reading = Number(o.reading);
    if (i % 101 === 7) o.extra = { nested: [1, 'two', null] };
    return JSON.stringify(o);
  }).join('\n') + '\n');
  // Bad records among good ones: a field too many, an unterminated quote at the end.
  const bad = join(dir, 'with-bad.csv');
  const lines = makeSensorCsv({ rows: 6000, seed: 23 }).split('\n');
  for (const at of [50, 900, 3000]) lines.splice(at, 0, `x${at},S001,north-ridge,1.5,routine,ok,surplus`);
  writeFileSync(bad, lines.join('\n').replace(/\n$/, '') + '\n9999999,S002,salt-flat,2.0,"open quote,ok\n');

  const common = { seed: 'twins', memory: '16MiB' };
  cases = [
    { name: 'csv-folds', kind: 'shuffle', options: { ...common, inputs: [csv], partitions: 4, folds: 5, stratify: 'fault', threads: 2 } },
    { name: 'crlf-split-stats', kind: 'shuffle', options: { ...common, inputs: [crlf], split: 'train=0.8,test=0.2', stratify: 'fault', stats: true, threads: 2 } },
    { name: 'jsonl', kind: 'shuffle', options: { ...common, inputs: [jsonl], partitions: 3, stratify: 'fault', stats: true, threads: 2 } },
    { name: 'jsonl-folds', kind: 'shuffle', options: { ...common, inputs: [jsonl], partitions: 2, folds: 3, threads: 0 } },
    { name: 'group', kind: 'shuffle', options: { ...common, inputs: [csv], group: 'sensor', partitions: 3, stratify: 'fault', threads: 2 } },
    { name: 'hash', kind: 'shuffle', options: { ...common, inputs: [csv], assign: 'hash', key: 'id', partitions: 4, threads: 0 } },
    { name: 'spread', kind: 'shuffle', options: { ...common, inputs: [csv], order: 'spread', stratify: 'fault', partitions: 2, threads: 2 } },
    { name: 'gzip', kind: 'shuffle', options: { ...common, inputs: [gz], gzip: true, partitions: 3, stratify: 'site', threads: 2 } },
    { name: 'quarantine', kind: 'shuffle', options: { ...common, inputs: [bad], onBadRecord: 'quarantine', partitions: 2, threads: 2 } },
    { name: 'profile', kind: 'profile', options: { inputs: [csv, jsonl], stratify: 'fault', threads: 2 } },
  ];
});

afterAll(() => removeDir(dir));

describe('the modules and the JavaScript twins write the same bytes', () => {
  it('every run: the same files (sha256) and manifests, run section aside', () => {
    const modules = runChild('modules', cases, {});
    const twins = runChild('twins', cases, TWINS);
    // The switches reached each child: the modules ran in one and none in the other.
    expect(modules.simd).toBe(true);
    expect(Object.values(modules.switches)).toEqual(['auto', 'auto', 'auto', 'auto', 'auto', 'auto']);
    expect(modules.kernels).toEqual({ jsonl: true, gather: true, sort: true, stats: true });
    expect(Object.values(twins.switches)).toEqual(['js', 'js', 'js', 'js', 'js', 'js']);
    expect(twins.kernels).toEqual({ jsonl: false, gather: false, sort: false, stats: false });
    // Each run wrote something worth comparing (parts, the quarantine file, a gzip part).
    for (const c of cases) {
      const got = modules.results[c.name]!;
      if (c.kind === 'profile') expect(got.profile, c.name).toMatch(/^[0-9a-f]{64}$/);
      else expect(Object.keys(got.files!).length, c.name).toBeGreaterThan(1);
    }
    expect(Object.keys(modules.results.quarantine!.files!)).toContain('rejected.csv');
    expect(Object.keys(modules.results.gzip!.files!).every((f) => f.endsWith('.gz'))).toBe(true);
    expect(twins.results).toEqual(modules.results);
  });

  it('without WebAssembly (node --jitless): the same bytes as the modules', () => {
    const few = cases.filter((c) => ['csv-folds', 'profile'].includes(c.name));
    const modules = runChild('few-modules', few, {});
    const jitless = runChild('jitless', few, {}, ['--jitless']);
    expect(jitless.simd).toBe(false);
    expect(jitless.kernels).toEqual({ jsonl: false, gather: false, sort: false, stats: false });
    expect(jitless.results).toEqual(modules.results);
  });
});
