#!/usr/bin/env node
// Micro-benchmark of stage 2 for one bucket: CPU time per record of each phase of gatherBucket.
//   node bench/micro/gather.mjs [--records 40000] [--rounds 20] [--plain] [--scheme 1|2]
//   (--plain: without --stats only; --scheme 1: deal rank r to position r, without the rank permutation)
// Builds one spill bucket from invented sensor records with the real scatter code, then deals it
// `rounds` times. CPU time (process.cpuUsage) is reported, so a busy machine distorts it less.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { RecordReader } from '../../dist/io/reader.js';
import { ScatterTask } from '../../dist/engine/scatter.js';
import { buildDealTable } from '../../dist/core/deal.js';
import { deriveSecret } from '../../dist/core/hash.js';
import { gatherBucket, preparePlan } from '../../dist/engine/gather.js';
import { TableStats } from '../../dist/core/stats.js';
import { setFlag } from '../../dist/flags.js';

const arg = (name, dflt) => {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? Number(process.argv[i + 1]) : dflt;
};
const records = arg('records', 40000);
const rounds = arg('rounds', 20);
const classes = ['none', 'drift', 'spike', 'dropout', 'overheat'];
let text = 'reading_id,sensor_id,site,taken_at,temp_c,humidity_pct,battery_v,vibration_g,note,fault\n';
for (let i = 0; i < records; i++) {
  const note = i % 3 === 0 ? `"checked, ok ${i % 97}"` : '';
  text += `${i},S${String(i % 5000).padStart(5, '0')},north-ridge,2025-05-03T22:39:${String(i % 60).padStart(2, '0')}Z,${(i % 400) / 10},${i % 100}.5,3.${i % 999},0.${i % 9999},${note},${classes[i % 5]}\n`;
}
const dir = mkdtempSync(join(tmpdir(), 'rowdeck-micro-'));
try {
  const secret = deriveSecret('micro');
  const task = new ScatterTask({ inputs: ['x.csv'], stratify: ['fault'], bins: [null], key: [], group: null, secret: Array.from(secret), spillDir: dir, task: 0, bits: 0, bufferBytes: 1 << 20, hashCells: null, cellKeyInHeader: null, store: null, censusStore: null });
  const reader = new RecordReader({ format: 'csv', header: true, wanted: ['fault'], file: 'x.csv', onBadRecord: 'fail' });
  const b1 = reader.push(Buffer.from(text));
  if (b1) task.addBatch(b1, 0);
  const b2 = reader.end();
  if (b2) task.addBatch(b2, 0);
  const res = task.finish();
  const pieces = [];
  // Chunks: (bucket, place, offset, length) each (CHUNK_FIELDS in src/engine/spill.ts); one bucket, in the file.
  for (let k = 0; k < res.chunks.length; k += 4) pieces.push({ task: 0, path: res.paths[0], offset: res.chunks[k + 2], length: res.chunks[k + 3] });
  const sizes = res.bucketCounts.map((c) => c[0]);
  const deal = { splits: [{ name: '', weight: 1 }], exactCounts: false, partitions: 8, folds: 1 };
  const scheme = arg('scheme', 2);
  const t = buildDealTable(sizes, deal, [], scheme === 2 ? deriveSecret('rank') : null);
  for (const stats of process.argv.includes('--plain') ? [false] : [false, true]) {
    const plan = {
      version: 1, bits: 0, buckets: 1, scatterTasks: 1, format: 'csv', delimiter: 44, lineEnding: '\n', mode: 'exact', order: 'random', cellKeyInHeader: false, deal,
      foldColumn: null, strataCount: sizes.length, localToGlobal: [sizes.map((_, i) => i)],
      quota: Array.from(t.quota), cumQuota: Array.from(t.cumQuota), offset: Array.from(t.offset), cellSecret: [1, 2, 3, 4], rankSecret: t.rankSecret ? Array.from(t.rankSecret) : null,
      groupsFile: null, groupStarts: null, statsColumns: stats ? ['reading_id', 'sensor_id', 'site', 'taken_at', 'temp_c', 'humidity_pct', 'battery_v', 'vibration_g', 'note', 'fault'] : [], excludeValues: false,
    };
    const prep = preparePlan(plan, null);
    const tables = stats ? Array.from({ length: 8 }, () => new TableStats(plan.statsColumns)) : null;
    setFlag('ROWDECK_PHASES', '1');
    let arena;
    gatherBucket(prep, { bucket: 0, pieces, rankStart: new Float64Array(sizes.length) }, tables);
    const c0 = process.cpuUsage();
    const phases = [0, 0, 0, 0, 0, 0];
    for (let r = 0; r < rounds; r++) {
      const out = gatherBucket(prep, { bucket: 0, pieces, rankStart: new Float64Array(sizes.length), ...(arena ? { arena } : {}) }, tables);
      arena = out.data.buffer;
      out.phases?.forEach((ms, k) => (phases[k] += ms));
    }
    const c = process.cpuUsage(c0);
    const per = (ms) => ((ms * 1e6) / (rounds * records)).toFixed(0);
    console.log(`stats=${stats}: ${(((c.user + c.system) * 1000) / (rounds * records)).toFixed(0)} ns/record CPU; wall per phase (ns/record): read ${per(phases[0])}, index+regroup ${per(phases[1])}, sort ${per(phases[2])}, deal ${per(phases[3])}, copy ${per(phases[4])}, fingerprint+stats ${per(phases[5])}`);
  }
  console.log(`records per round ${records}`);
} finally {
  rmSync(dir, { recursive: true, force: true });
}
