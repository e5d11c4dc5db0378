#!/usr/bin/env node
// The record reader alone, over bytes already in memory, `--rounds` times: for counting
// instructions (count-instructions.sh), where timings on a shared machine are too noisy.
//   node bench/micro/read.mjs [--file bench/data/readings-100m.csv] [--mb 40] [--rounds 1] [--columns fault] [--scan auto|js|simd]
import { RecordReader } from '../../dist/io/reader.js';
import { useStructuralScan } from '../../dist/io/csv-records.js';
import { arg, loadInput } from './options.mjs';

const { file, data, rounds } = loadInput();
// --columns '*': every column (named by the header line).
const columns = arg('columns', 'fault');
const wanted = columns === '*' ? data.subarray(0, data.indexOf(10)).toString().split(',') : columns.split(',');
useStructuralScan(arg('scan', 'auto'));
let records = 0;
let sum = 0;
const t0 = performance.now();
for (let r = 0; r < rounds; r++) {
  const reader = new RecordReader({ format: 'csv', header: true, wanted, file, onBadRecord: 'skip', onReject() {} });
  records = 0;
  const take = (b) => {
    if (!b) return;
    records += b.count;
    for (let i = 0; i < b.count * b.wanted; i++) sum += b.fieldEnd[i] - b.fieldStart[i];
  };
  for (let at = 0; at < data.length; at += 4 << 20) take(reader.push(data.subarray(at, at + (4 << 20))));
  take(reader.end());
}
const ms = performance.now() - t0;
console.log(`records per round ${records}`);
console.log(`${((ms * 1e6) / (rounds * records)).toFixed(0)} ns a record (wall), field bytes ${sum}`);
