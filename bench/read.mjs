#!/usr/bin/env node
// Reading speed of the record reader on one thread: every record of a CSV is read and the LAST
// column located (and its length summed, so the work cannot be skipped). A Buffer.indexOf
// newline count over the same bytes is printed as a floor reference.
//
//   npm run build && node bench/read.mjs [path.csv] [--bytes 1e9]
//
// Without a path, bench/data/readings-<size>.csv is generated first (bench/generate.mjs, seed 1).
import { openSync, readSync, closeSync, existsSync, statSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { cpus } from 'node:os';
import { fileURLToPath } from 'node:url';
import { dirname, join } from 'node:path';

const here = dirname(fileURLToPath(import.meta.url));
const { RecordReader } = await import(join(here, '..', 'dist', 'io', 'reader.js'));

const args = process.argv.slice(2);
let path = null;
let bytes = 1e9;
for (let i = 0; i < args.length; i++) {
  if (args[i] === '--bytes') bytes = Number(args[++i]);
  else path = args[i];
}
if (!path) {
  path = join(here, 'data', `readings-${bytes >= 1e9 ? `${bytes / 1e9}g` : `${bytes / 1e6}m`}.csv`);
  if (!existsSync(path)) {
    process.stderr.write(`generating ${path} …\n`);
    execFileSync(process.execPath, [join(here, 'generate.mjs'), '--bytes', String(bytes), '--seed', '1', '--out', path], { stdio: 'inherit' });
  }
}

const CHUNK = 1 << 20;
const size = statSync(path).size;

/** Reads the file in 1 MiB chunks into one reused buffer (the reader copies what it carries). */
function eachChunk(fn) {
  const fd = openSync(path, 'r');
  const buf = Buffer.allocUnsafe(CHUNK);
  for (;;) {
    const n = readSync(fd, buf, 0, CHUNK, null);
    if (n === 0) break;
    fn(buf.subarray(0, n));
  }
  closeSync(fd);
}

function countNewlines() {
  let lines = 0;
  const t0 = process.hrtime.bigint();
  eachChunk((b) => {
    for (let i = b.indexOf(10); i >= 0; i = b.indexOf(10, i + 1)) lines++;
  });
  return { lines, ms: Number(process.hrtime.bigint() - t0) / 1e6 };
}

function readLastColumn() {
  // Learn the last column's name from the header.
  const fd = openSync(path, 'r');
  const head = Buffer.alloc(64 * 1024);
  readSync(fd, head, 0, head.length, 0);
  closeSync(fd);
  const cols = head.toString('utf8', 0, head.indexOf(10)).replace(/\r$/, '').split(',');
  const last = cols[cols.length - 1];
  const reader = new RecordReader({ format: 'csv', header: true, wanted: [last], file: path, onBadRecord: 'fail' });
  let sum = 0;
  const take = (batch) => {
    if (!batch) return;
    const s = batch.fieldStart, e = batch.fieldEnd;
    for (let i = 0; i < batch.count; i++) sum += e[i] - s[i];
  };
  const t0 = process.hrtime.bigint();
  const c0 = process.cpuUsage();
  eachChunk((b) => take(reader.push(b)));
  take(reader.end());
  const cpu = process.cpuUsage(c0);
  return { ms: Number(process.hrtime.bigint() - t0) / 1e6, cpuMs: (cpu.user + cpu.system) / 1000, records: reader.stats.records, lines: reader.stats.lines, sum, last };
}

const mb = size / 1e6;
console.log(`machine: ${cpus()[0]?.model ?? 'unknown'}, ${cpus().length} cores; Node ${process.version}`);
console.log(`input: ${path} (${mb.toFixed(1)} MB)`);
countNewlines(); // warm the page cache
const floor = countNewlines();
console.log(`indexOf newline count (floor): ${floor.lines} lines in ${floor.ms.toFixed(0)} ms = ${(mb / (floor.ms / 1000)).toFixed(0)} MB/s`);
const runs = [];
for (let r = 0; r < 3; r++) runs.push(readLastColumn());
const best = runs.reduce((a, b) => (a.ms < b.ms ? a : b));
console.log(`reader, locate last column "${best.last}": ${best.records} records, ${best.lines} lines`);
console.log(`  best of 3 (wall): ${best.ms.toFixed(0)} ms = ${(mb / (best.ms / 1000)).toFixed(0)} MB/s, ${(best.records / (best.ms / 1000) / 1e6).toFixed(2)} M records/s`);
console.log(`  same run, CPU time of this process: ${best.cpuMs.toFixed(0)} ms = ${(mb / (best.cpuMs / 1000)).toFixed(0)} MB/s (wall above CPU means the machine was busy with other work)`);
console.log(`  all runs (wall / CPU ms): ${runs.map((r) => `${r.ms.toFixed(0)}/${r.cpuMs.toFixed(0)}`).join(', ')}`);
