#!/usr/bin/env node
// Same bytes before and after a change meant to leave behaviour alone. Runs a fixed set of
// shuffles, profiles, verifies and refused runs with one build of the command line, and records
// the sha256 of every output file, of each manifest without its `run` section, of each profile
// and verify report without timings, and the exit status and error text of each run. Given an
// earlier record (`--against`), it lists every difference and exits 1 when there is one.
//
//   node bench/same-bytes.mjs --other ../old-checkout        (both builds, one after the other, then the differences)
//   node bench/same-bytes.mjs --cli /tmp/old/dist/cli/main.cjs --work /tmp/sb-old --record /tmp/old.json
//   node bench/same-bytes.mjs --cli dist/cli/main.cjs --work /tmp/sb-new --record /tmp/new.json --against /tmp/old.json
//
// --data: the CSV the large cases read (default bench/data/readings-200m.csv, see bench/README.md);
// a JSON Lines input is made from its first --jsonl-records records (default 200,000), with csv-parse.
// --only a,b: run only the named cases (a quick look; the record then holds only those).
// Both builds see the same relative paths (every input is linked or written into --work), so
// messages and manifests that name files compare as they are.
import { spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { closeSync, cpSync, createReadStream, existsSync, mkdirSync, openSync, readdirSync, readFileSync, readSync, rmSync, statSync, symlinkSync, writeFileSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parse } from 'csv-parse';

const repo = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const arg = (name, dflt) => {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? process.argv[i + 1] : dflt;
};
const cli = resolve(arg('cli', join(repo, 'dist/cli/main.cjs')));
const data = resolve(arg('data', join(repo, 'bench/data/readings-200m.csv')));
const work = resolve(arg('work', '/tmp/rowdeck-same-bytes'));
const recordPath = arg('record', null);
const againstPath = arg('against', null);
const jsonlRecords = Number(arg('jsonl-records', 200_000));
const only = arg('only', null)?.split(',') ?? null;

const SEED = ['--seed', 'same-bytes', '--quiet'];

// --other CHECKOUT: that build's record first (its dist/ built), then this build's against it.
const other = arg('other', null);
if (other) {
  const self = fileURLToPath(import.meta.url);
  const keep = process.argv.slice(2).filter((a, i, all) => a !== '--other' && all[i - 1] !== '--other' && !['--work', '--record', '--against', '--cli'].includes(a) && !['--work', '--record', '--against', '--cli'].includes(all[i - 1]));
  const a = spawnSync(process.execPath, [self, '--cli', [resolve(other, 'dist/cli/main.cjs'), resolve(other, 'dist/cli/main.js')].find((f) => existsSync(f)) ?? resolve(other, 'dist/cli/main.cjs'), '--work', `${work}-other`, '--record', `${work}-other.json`, ...keep], { stdio: 'inherit' });
  if (a.status !== 0) process.exit(a.status ?? 1);
  const b = spawnSync(process.execPath, [self, '--cli', cli, '--work', `${work}-this`, '--record', `${work}-this.json`, '--against', `${work}-other.json`, ...keep], { stdio: 'inherit' });
  process.exit(b.status ?? 1);
}

/** Every case: a name and the command line after `rowdeck`. Outputs go to a folder named after the case. */
const CASES = [
  // shuffle: each writes ./NAME
  ['folds', ['shuffle', 'data.csv', '--partitions', '4', '--stratify', 'fault', '--folds', '5']],
  ['stats', ['shuffle', 'data.csv', '--partitions', '3', '--stratify', 'site', '--stats']],
  ['group', ['shuffle', 'data.csv', '--partitions', '4', '--group', 'sensor_id', '--stratify', 'fault']],
  ['bins-split', ['shuffle', 'data.csv', '--split', 'train=0.8,test=0.2', '--stratify', 'temp_c:bins=4,fault', '--folds', '3']],
  ['hash-key', ['shuffle', 'data.csv', '--assign', 'hash', '--key', 'sensor_id,reading_id', '--partitions', '3', '--stratify', 'fault']],
  ['jsonl', ['shuffle', 'slice.jsonl', '--partitions', '3', '--stratify', 'fault,site', '--folds', '4', '--stats']],
  ['jsonl-spread', ['shuffle', 'slice.jsonl', '--partitions', '2', '--stratify', 'humidity_pct:bins=3', '--order', 'spread', '--stats']],
  ['small', ['shuffle', 'small.csv', '--partitions', '2', '--stratify', 'fault', '--folds', '3', '--stats', '--gzip']],
  ['small-withheld', ['shuffle', 'small.csv', '--partitions', '2', '--stratify', 'fault,site', '--folds', '3', '--exclude-values']],
  // head.csv: the data's first 200,000 records, for the modes and layouts of a shuffle
  ['stats-lanes', ['shuffle', 'head.csv', '--partitions', '4', '--stratify', 'fault', '--stats', '--threads', '2']],
  ['stats-read-back', ['shuffle', 'head.csv', '--partitions', '40', '--stats', '--memory', '8MiB', '--threads', '2']],
  ['grouped', ['shuffle', 'head.csv', '--partitions', '4', '--group', 'sensor_id', '--order', 'grouped']],
  ['spread', ['shuffle', 'head.csv', '--partitions', '3', '--stratify', 'fault', '--order', 'spread', '--folds', '2']],
  ['splits', ['shuffle', 'head.csv', '--split', 'train=0.8,valid=0.1,test=0.1', '--stratify', 'fault']],
  ['counts-rest', ['shuffle', 'head.csv', '--split', 'test=5000,train=*', '--stratify', 'site']],
  ['gzip', ['shuffle', 'head.csv', '--partitions', '2', '--gzip', '--stratify', 'fault']],
  ['calling-thread', ['shuffle', 'head.csv', '--partitions', '3', '--stratify', 'fault', '--threads', '0']],
  ['multi-pass', ['shuffle', 'head.csv', '--partitions', '5', '--stratify', 'fault', '--folds', '2', '--memory', '1MiB']],
  // profile: stdout
  ['profile', ['profile', 'data.csv', '--stratify', 'fault,site', '--partitions', '4', '--folds', '5', '--json']],
  ['profile-jsonl', ['profile', 'slice.jsonl', '--stratify', 'humidity_pct:bins=5', '--json']],
  ['profile-warnings', ['profile', 'small.csv', '--stratify', 'fault', '--partitions', '200', '--folds', '130', '--json']],
  ['profile-warnings-withheld', ['profile', 'small.csv', '--stratify', 'fault', '--partitions', '200', '--folds', '130', '--exclude-values', '--json']],
  ['profile-text', ['profile', 'small.csv', '--stratify', 'fault,site', '--exclude-values']],
  // verify: stdout (after the shuffles above)
  ['verify-folds', ['verify', 'folds', '--json']],
  ['verify-jsonl', ['verify', 'jsonl', '--json', '--against', 'slice.jsonl']],
  ['verify-spread', ['verify', 'jsonl-spread', '--json', '--no-replay']],
  ['verify-tampered', ['verify', 'tampered', '--json', '--no-replay']],
  ['verify-tampered-withheld', ['verify', 'tampered-withheld', '--json', '--no-replay']],
  // refused runs: exit status and stderr
  ['refused-tolerance', ['shuffle', 'tiny.csv', '--out', 'never', '--stratify', 'c', '--partitions', '4', '--tolerance', '0.1']],
  ['refused-tolerance-withheld', ['shuffle', 'tiny.csv', '--out', 'never', '--stratify', 'c', '--partitions', '4', '--tolerance', '0.1', '--exclude-values']],
  ['refused-tolerance-withheld-2', ['shuffle', 'tiny2.csv', '--out', 'never', '--stratify', 'c', '--partitions', '4', '--tolerance', '0.1', '--exclude-values']],
  ['refused-strata', ['shuffle', 'slice.jsonl', '--out', 'never', '--stratify', 'reading_id']],
  ['refused-strata-profile', ['profile', 'slice.jsonl', '--stratify', 'reading_id', '--json']],
  ['refused-column', ['shuffle', 'small.csv', '--out', 'never', '--stratify', 'fualt']],
  ['refused-bins', ['profile', 'small.csv', '--stratify', 'site:bins=3']],
];

const sha = (b) => createHash('sha256').update(b).digest('hex');

/** A JSON report or manifest without what differs from run to run (timings, the run section). */
function canonical(text) {
  const strip = (v) => {
    if (Array.isArray(v)) return v.map(strip);
    if (v === null || typeof v !== 'object') return v;
    const o = {};
    for (const [k, x] of Object.entries(v)) if (k !== 'run' && k !== 'timingsMs' && k !== 'createdAt') o[k] = strip(x);
    return o;
  };
  return JSON.stringify(strip(JSON.parse(text)));
}

async function writeJsonlSlice(from, to, n) {
  const lines = [];
  const parser = createReadStream(from).pipe(parse({ columns: true, to: n }));
  let i = 0;
  for await (const r of parser) {
    const o = {};
    for (const [k, v] of Object.entries(r)) {
      // Numbers as numbers, an empty note as an absent key or null by turns, the rest as strings.
      if (v === '' && k === 'note') {
        if (i % 2 === 0) o[k] = null;
      } else o[k] = v !== '' && /^-?\d+(\.\d+)?$/.test(v) && k !== 'sensor_id' ? Number(v) : v;
    }
    lines.push(JSON.stringify(o));
    i++;
  }
  writeFileSync(to, lines.join('\n') + '\n');
}

/** The first `count` records of a CSV file, its header among them (a quote toggles in and out of a quoted field, RFC 4180). */
function headLines(path, count) {
  const fd = openSync(path, 'r');
  const chunks = [];
  const buf = Buffer.alloc(1 << 20);
  let lines = 0;
  let quoted = false;
  try {
    for (let n = readSync(fd, buf); n > 0 && lines < count; n = readSync(fd, buf)) {
      let end = n;
      for (let i = 0; i < n; i++) {
        if (buf[i] === 0x22) quoted = !quoted;
        else if (buf[i] === 0x0a && !quoted && ++lines === count) {
          end = i + 1;
          break;
        }
      }
      chunks.push(Buffer.from(buf.subarray(0, end)));
    }
  } finally {
    closeSync(fd);
  }
  return Buffer.concat(chunks);
}

/** Sha256 of each file under dir (manifest.json canonical), by relative path. */
function hashFolder(dir) {
  const out = {};
  const walk = (d, rel) => {
    for (const name of readdirSync(d).sort()) {
      const p = join(d, name);
      const r = rel ? `${rel}/${name}` : name;
      if (statSync(p).isDirectory()) walk(p, r);
      else out[r] = name === 'manifest.json' ? sha(canonical(readFileSync(p, 'utf8'))) : sha(readFileSync(p));
    }
  };
  walk(dir, '');
  return out;
}

/** A copy of a shuffle's folder with its manifest's class counts moved between two parts. */
function tamper(from, to) {
  rmSync(to, { recursive: true, force: true });
  cpSync(from, to, { recursive: true });
  const m = JSON.parse(readFileSync(join(to, 'manifest.json'), 'utf8'));
  m.output.parts[0].strata[0] += 1;
  m.output.parts[1].strata[0] -= 1;
  m.strata.values[1].records += 1;
  writeFileSync(join(to, 'manifest.json'), JSON.stringify(m, null, 2));
}

mkdirSync(work, { recursive: true });
process.chdir(work);
if (!existsSync('data.csv')) symlinkSync(data, 'data.csv');
if (!existsSync('small.csv')) cpSync(join(repo, 'examples/sensor-readings.csv'), 'small.csv');
writeFileSync('tiny.csv', 'id,c\n1,a\n2,b\n3,a\n4,a\n5,a\n6,a\n7,b\n8,a\n9,a\n');
// The rare class first in key order, this time: "stratum #N" counts in key order either way.
writeFileSync('tiny2.csv', 'id,c\n1,b\n2,a\n3,b\n4,b\n5,b\n6,b\n7,a\n8,b\n9,b\n');
if (!existsSync('slice.jsonl')) await writeJsonlSlice(data, 'slice.jsonl', jsonlRecords);
if (!existsSync('head.csv')) writeFileSync('head.csv', headLines(data, 200_001));

const record = { cli, data, inputs: { 'slice.jsonl': sha(readFileSync('slice.jsonl')), 'small.csv': sha(readFileSync('small.csv')), 'head.csv': sha(readFileSync('head.csv')) }, cases: {} };
for (const [name, argv] of CASES) {
  if (only && !only.includes(name)) continue;
  const full = [...argv, ...SEED];
  if (argv[0] === 'shuffle' && !argv.includes('--out')) {
    rmSync(name, { recursive: true, force: true });
    full.push('--out', name);
  }
  if (argv[0] === 'verify') full.splice(full.indexOf('--seed'), 2);
  if (argv[0] === 'profile') full.splice(full.indexOf('--seed'), 2);
  if (name === 'verify-tampered') tamper('small', 'tampered');
  if (name === 'verify-tampered-withheld') tamper('small-withheld', 'tampered-withheld');
  const t0 = Date.now();
  const r = spawnSync(process.execPath, [cli, ...full], { encoding: 'utf8', maxBuffer: 1 << 30 });
  const entry = { argv: full.join(' '), exit: r.status, stderr: r.stderr };
  if (argv[0] === 'shuffle' && r.status === 0) entry.files = hashFolder(name);
  if (r.stdout) entry.stdout = argv.includes('--json') && r.status !== null && r.stdout.trimStart().startsWith('{') ? sha(canonical(r.stdout)) : r.stdout;
  record.cases[name] = entry;
  console.log(`${name}: exit ${r.status}, ${((Date.now() - t0) / 1000).toFixed(1)} s${entry.files ? `, ${Object.keys(entry.files).length} files` : ''}`);
}
if (recordPath) writeFileSync(resolve(recordPath), JSON.stringify(record, null, 2));

if (againstPath) {
  const old = JSON.parse(readFileSync(resolve(againstPath), 'utf8'));
  const diffs = [];
  for (const k of Object.keys(record.inputs)) if (old.inputs[k] !== record.inputs[k]) diffs.push(`input ${k} differs: the two runs did not read the same data`);
  for (const [name, now] of Object.entries(record.cases)) {
    const was = old.cases[name];
    if (!was) {
      diffs.push(`${name}: not in the earlier record`);
      continue;
    }
    for (const key of ['argv', 'exit', 'stderr', 'stdout']) {
      if (JSON.stringify(was[key]) !== JSON.stringify(now[key])) diffs.push(`${name}: ${key} differs\n    was: ${JSON.stringify(was[key])}\n    now: ${JSON.stringify(now[key])}`);
    }
    const files = new Set([...Object.keys(was.files ?? {}), ...Object.keys(now.files ?? {})]);
    for (const f of files) if (was.files?.[f] !== now.files?.[f]) diffs.push(`${name}/${f}: ${was.files?.[f] ?? 'absent'} -> ${now.files?.[f] ?? 'absent'}`);
  }
  const compared = Object.keys(record.cases).length;
  const files = Object.values(record.cases).reduce((a, c) => a + Object.keys(c.files ?? {}).length, 0);
  if (diffs.length === 0) console.log(`same bytes: ${compared} cases, ${files} output files, every report, message and exit status`);
  else {
    console.log(`${diffs.length} difference(s):`);
    for (const d of diffs) console.log(`  ${d}`);
    process.exitCode = 1;
  }
}
