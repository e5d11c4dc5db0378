/**
 * Worker entry for stage 2: one task = one bucket (see src/workers/lanes.ts for the protocol).
 *
 *   main thread                              this worker
 *   plan.json in the spill folder  ───────▶  loaded once, cached
 *   { bucket, paths, rankStart, arena } ──▶  read spill files, sort, deal, lay out part bytes
 *   ordered writer (bucket order)  ◀───────  { data (transferred), partStart, counts, fingerprints }
 *   finish ───────────────────────────────▶  per-part statistics of every bucket this worker dealt
 *
 * Statistics stay here until the end: they merge exactly, so which worker saw which bucket does
 * not change the result, and shipping them per bucket cost more than dealing the bucket.
 */
import { readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { workerData } from 'node:worker_threads';
import { TableStats, type SerializedStats } from '../core/stats.js';
import { gatherBucket, preparePlan, type GatherResult, type GatherTask, type GroupTable, type PreparedPlan } from '../engine/gather.js';
import type { GatherPlan } from '../engine/plan.js';
import { serveLane } from './lanes.js';

export interface GatherWorkerData {
  planPath: string;
}

export type GatherFinal = SerializedStats[] | null;

function loadPlan(planPath: string): PreparedPlan {
  const plan = JSON.parse(readFileSync(planPath, 'utf8')) as GatherPlan;
  let groups: GroupTable | null = null;
  if (plan.groupsFile) {
    const raw = readFileSync(join(dirname(planPath), plan.groupsFile));
    const buf = new Uint8Array(raw).buffer;
    const n = raw.byteLength / 12;
    groups = {
      keyHi: new Uint32Array(buf, 0, n),
      keyLo: new Uint32Array(buf, n * 4, n),
      cell: new Uint32Array(buf, n * 8, n),
    };
  }
  return preparePlan(plan, groups);
}

const { data } = workerData as { lane: number; data: GatherWorkerData };
const prep = loadPlan(data.planPath);
const stats = prep.plan.statsColumns.length > 0 ? Array.from({ length: prep.plan.deal.splits.length * prep.plan.deal.partitions }, () => new TableStats(prep.plan.statsColumns)) : null;

serveLane<GatherTask, GatherResult, GatherFinal>(
  (task) => {
    const result = gatherBucket(prep, task, stats);
    // Hand the output bytes over without copying them.
    return { result, transfer: [result.data.buffer as ArrayBuffer] };
  },
  () => ({ final: stats ? stats.map((t) => t.toJSON()) : null }),
);
