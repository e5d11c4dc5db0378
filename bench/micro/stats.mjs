#!/usr/bin/env node
// Micro-benchmark of the column statistics (src/core/stats.ts): CPU time per record and MB/s of
// TableStats over every column of the invented sensor readings (bench/generate.mjs).
//
//   npm run build && node bench/micro/stats.mjs [path.csv] [--mb 40] [--rounds 3] [--cap 1000] [--columns] [--only COL] [--dist DIR]
//
// Without a path, bench/data/readings-100m.csv is used (generated first if absent, seed 1). The
// first --mb megabytes are read and split into record batches (all columns wanted) once, kept in
// memory, and then fed to a fresh TableStats in each round, so reading is not part of the figure.
// CPU time (process.cpuUsage) is reported besides wall time: the machine may be shared, so compare
// the best rounds, and builds in alternating processes. --columns also times each column alone
// (ns per value); --dist takes TableStats from another build (e.g. a copy of an older dist/).
import { existsSync, openSync, readSync, closeSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { cpus } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const here = dirname(fileURLToPath(import.meta.url));
const dist = join(here, '..', '..', 'dist');
const { RecordReader } = await import(join(dist, 'io', 'reader.js'));
const distArg = process.argv.indexOf('--dist');
const statsDist = distArg > 0 ? process.argv.splice(distArg, 2)[1] : dist;
const perColumn = process.argv.includes('--columns');
if (perColumn) process.argv.splice(process.argv.indexOf('--columns'), 1);
const onlyArg = process.argv.indexOf('--only');
const only = onlyArg > 0 ? process.argv.splice(onlyArg, 2)[1] : null;
const { TableStats } = await import(join(statsDist, 'core', 'stats.js'));
const { packBatch, unpackBatch } = await import(join(dist, 'engine', 'scatter.js'));

const args = process.argv.slice(2);
const opt = (name, dflt) => {
  const i = args.indexOf(`--${name}`);
  if (i < 0) return dflt;
  const v = Number(args[i + 1]);
  args.splice(i, 2);
  return v;
};
const mb = opt('mb', 40);
const rounds = opt('rounds', 3);
const cap = opt('cap', 1000);
let path = args[0];
if (!path) {
  path = join(here, '..', 'data', 'readings-100m.csv');
  if (!existsSync(path)) {
    process.stderr.write(`generating ${path} …\n`);
    execFileSync(process.execPath, [join(here, '..', 'generate.mjs'), '--bytes', '1e8', '--seed', '1', '--out', path], { stdio: 'inherit' });
  }
}

/** Learns the columns from the header (first 64 KiB). */
function readColumns() {
  const r = new RecordReader({ format: 'csv', header: true, wanted: [], file: path, onBadRecord: 'fail' });
  const fd = openSync(path, 'r');
  const buf = Buffer.alloc(64 * 1024);
  const n = readSync(fd, buf, 0, buf.length, 0);
  closeSync(fd);
  r.push(buf.subarray(0, n));
  return r.schema.columns;
}

const columns = readColumns();
const reader = new RecordReader({ format: 'csv', header: true, wanted: columns, file: path, onBadRecord: 'fail' });
const batches = [];
let bytes = 0;
let records = 0;
{
  const fd = openSync(path, 'r');
  const buf = Buffer.allocUnsafe(1 << 20);
  while (bytes < mb * 1e6) {
    const n = readSync(fd, buf, 0, buf.length, null);
    if (n === 0) break;
    const b = reader.push(buf.subarray(0, n));
    if (b && b.count > 0) {
      // A copy: the reader reuses its buffers.
      const { batch } = unpackBatch(packBatch(b, 0, undefined));
      batches.push(batch);
      records += b.count;
      bytes += b.next[b.count - 1] - b.start[0];
    }
  }
  closeSync(fd);
}

if (only !== null) {
  // One column alone (for counting instructions per value: see count-instructions.sh).
  const w = columns.indexOf(only);
  if (w < 0) throw new Error(`no column ${only}`);
  for (let j = 0; j < batches.length; j++) {
    const b = batches[j];
    const pick = (a) => { const o = new a.constructor(b.count); for (let i = 0; i < b.count; i++) o[i] = a[i * b.wanted + w]; return o; };
    batches[j] = { ...b, wanted: 1, fieldStart: pick(b.fieldStart), fieldEnd: pick(b.fieldEnd), fieldKind: pick(b.fieldKind) };
  }
  columns.splice(0, columns.length, only);
}
console.log(`records per round ${records}`);
console.log(`${path}: ${columns.length} columns, ${records.toLocaleString('en-US')} records, ${(bytes / 1e6).toFixed(1)} MB in memory; ${cpus()[0]?.model ?? '?'}, Node ${process.version}`);
const results = [];
let last;
for (let r = 0; r < rounds; r++) {
  const t = new TableStats(columns, { distinctCap: cap });
  const c0 = process.cpuUsage();
  const w0 = performance.now();
  for (const b of batches) t.addBatch(b);
  const wall = performance.now() - w0;
  const c = process.cpuUsage(c0);
  const cpu = (c.user + c.system) / 1000;
  results.push(cpu);
  last = t;
  console.log(`round ${r + 1}: ${((cpu * 1e6) / records).toFixed(0)} ns/record CPU (${((cpu * 1e6) / records / columns.length).toFixed(1)} ns/field), ${(bytes / 1e6 / (cpu / 1000)).toFixed(0)} MB/s CPU, wall ${wall.toFixed(0)} ms`);
}
const best = Math.min(...results);
if (perColumn) {
  // Each column alone, from batches holding that column only (no other column's state in cache).
  const single = columns.map((_, w) =>
    batches.map((b) => {
      const fieldStart = new Uint32Array(b.count);
      const fieldEnd = new Uint32Array(b.count);
      const fieldKind = new Uint8Array(b.count);
      for (let i = 0; i < b.count; i++) {
        fieldStart[i] = b.fieldStart[i * b.wanted + w];
        fieldEnd[i] = b.fieldEnd[i * b.wanted + w];
        fieldKind[i] = b.fieldKind[i * b.wanted + w];
      }
      return { ...b, wanted: 1, fieldStart, fieldEnd, fieldKind };
    }),
  );
  const perCol = columns.map(() => Infinity);
  for (let r = 0; r < rounds; r++) {
    columns.forEach((name, w) => {
      const t = new TableStats([name], { distinctCap: cap });
      const c0 = process.cpuUsage();
      for (const b of single[w]) t.addBatch(b);
      const c = process.cpuUsage(c0);
      perCol[w] = Math.min(perCol[w], ((c.user + c.system) * 1000) / records);
    });
  }
  console.log(`per column, best of ${rounds} (ns per value, CPU): ${columns.map((name, w) => `${name} ${perCol[w].toFixed(0)}`).join(', ')}`);
}
console.log(`best: ${((best * 1e6) / records).toFixed(0)} ns/record, ${(bytes / 1e6 / (best / 1000)).toFixed(0)} MB/s (CPU time, one thread)`);
// Print something derived from the result so the work cannot be skipped, and as a sanity check.
const s = last.summary();
console.log(s.map((c) => `${c.name}:${c.type}${c.approximate ? '~' : ''}${c.distinct}`).join(' '));
