#!/usr/bin/env node
// Micro-benchmark of stage 1's per-record work (one scatter task) and of the reader feeding it.
//   node bench/micro/scatter.mjs [--mb 50]
// CPU time (process.cpuUsage) per record, so a busy machine distorts it less.
import { mkdtempSync, rmSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { RecordReader } from '../../dist/io/reader.js';
import { ScatterTask, packBatch, unpackBatch } from '../../dist/engine/scatter.js';
import { deriveSecret } from '../../dist/core/hash.js';

const i = process.argv.indexOf('--file');
const file = i > 0 ? process.argv[i + 1] : 'bench/data/readings-100m.csv';
const data = readFileSync(file);
const dir = mkdtempSync(join(tmpdir(), 'rowdeck-micro-'));
const cpu = () => { const c = process.cpuUsage(); return (c.user + c.system) / 1000; };
try {
  const read = (onBatch) => {
    const reader = new RecordReader({ format: 'csv', header: true, wanted: ['fault'], file, onBadRecord: 'fail' });
    let n = 0;
    for (let at = 0; at < data.length; at += Number(process.env.CHUNK ?? 1048576)) {
      const b = reader.push(data.subarray(at, Math.min(data.length, at + Number(process.env.CHUNK ?? 1048576))));
      if (b) { n += b.count; onBatch(b); }
    }
    const b = reader.end();
    if (b) { n += b.count; onBatch(b); }
    return n;
  };
  read(() => {}); // warm-up
  let t = cpu();
  const n = read(() => {});
  const readMs = cpu() - t;
  let spare;
  t = cpu();
  read((b) => { const buf = packBatch(b, 0, spare); spare = buf; unpackBatch(buf); });
  const packMs = cpu() - t - readMs;
  for (const bits of (process.env.BITS ?? "6,6,8,8,11,11").split(",").map(Number)) {
    const task = new ScatterTask({ inputs: [file], stratify: ['fault'], bins: [null], key: [], group: null, secret: Array.from(deriveSecret('m')), spillDir: dir, task: Math.floor(Math.random() * 1e6), bits, bufferBytes: Number(process.env.BUF ?? 131072) });
    t = cpu();
    read((b) => task.addBatch(b, 0));
    task.finish();
    const scatterMs = cpu() - t - readMs;
    console.log(`${n} records, ${2 ** bits} buckets: read ${(readMs * 1e6 / n).toFixed(0)} ns/rec, pack+unpack ${(packMs * 1e6 / n).toFixed(0)} ns/rec, scatter task ${(scatterMs * 1e6 / n).toFixed(0)} ns/rec`);
  }
} finally {
  rmSync(dir, { recursive: true, force: true });
}
