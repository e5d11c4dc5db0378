#!/usr/bin/env node
// Stage 1's per-record work alone: one scatter task (key, class, spill bucket, fingerprint) over
// batches read beforehand, `--rounds` times. Made for counting instructions (see
// count-instructions.sh), where timing on a shared machine is too noisy to see a 5 % change.
//   node bench/micro/stage1.mjs [--file bench/data/readings-100m.csv] [--mb 40] [--rounds 1] [--bits 10]
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { RecordReader } from '../../dist/io/reader.js';
import { ScatterTask } from '../../dist/engine/scatter.js';
import { deriveSecret } from '../../dist/core/hash.js';
import { arg, loadInput } from './options.mjs';

const { file, data, rounds } = loadInput();
const bits = Number(arg('bits', 10));
const dir = mkdtempSync(join(tmpdir(), 'rowdeck-micro-'));
try {
  // Owned copies of each batch (the reader reuses its arrays).
  const batches = [];
  const reader = new RecordReader({ format: 'csv', header: true, wanted: ['fault'], file, onBadRecord: 'skip', onReject() {} });
  const own = (b) => b && batches.push({ ...b, data: Buffer.from(b.data), start: b.start.slice(), end: b.end.slice(), next: b.next.slice(), offset: b.offset.slice(), line: b.line.slice(), fieldStart: b.fieldStart.slice(), fieldEnd: b.fieldEnd.slice(), fieldKind: b.fieldKind.slice() });
  for (let at = 0; at < data.length; at += 2 << 20) own(reader.push(data.subarray(at, at + (2 << 20))));
  own(reader.end());
  const records = batches.reduce((a, b) => a + b.count, 0);
  for (let r = 0; r < rounds; r++) {
    const task = new ScatterTask({ inputs: [file], stratify: ['fault'], bins: [null], key: [], group: null, secret: Array.from(deriveSecret('micro')), spillDir: dir, task: r, bits, bufferBytes: (512 << 20) / 4 / 2 ** bits, hashCells: null });
    for (const b of batches) task.addBatch(b, 0);
    task.finish();
  }
  console.log(`records per round ${records}`);
} finally {
  rmSync(dir, { recursive: true, force: true });
}
