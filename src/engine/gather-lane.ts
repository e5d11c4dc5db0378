/**
 * What one lane of stage 2 does, wherever it runs: on a worker thread (src/workers/shuffle-worker.ts)
 * or, for small inputs, on the calling thread (see `InlineLanes`). It reads the plan with its
 * first bucket, deals each bucket it is given, and keeps every part's statistics until the end
 * (or, where they would take too much memory, reads the parts back one at a time afterwards).
 */
import { readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { TableStats, type SerializedStats } from '../core/stats.js';
import { gatherBucket, preparePlan, type GatherResult, type GatherTask, type GroupTable, type PreparedPlan } from './gather.js';
import { statsOfPartFile, type PartStatsTask } from './part-stats.js';
import type { GatherPlan } from './plan.js';

export type GatherFinal = SerializedStats[] | null;

export function loadGatherPlan(planPath: string): PreparedPlan {
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

export interface GatherLane {
  /** Deals one bucket; the result's bytes may be handed over without copying. */
  handle(task: GatherTask): { result: GatherResult; transfer: ArrayBuffer[] };
  /** One part's statistics, read back from its file once every bucket is dealt. */
  partStats(task: PartStatsTask): Promise<{ result: SerializedStats }>;
  /** Every part's statistics over the buckets this lane dealt (null unless the lanes keep them). */
  finish(): { final: GatherFinal };
}

export function gatherLane(planPath: string): GatherLane {
  const prep = loadGatherPlan(planPath);
  const { plan } = prep;
  const stats = plan.statsColumns.length > 0 && plan.statsInLanes ? Array.from({ length: plan.deal.splits.length * plan.deal.partitions }, () => new TableStats(plan.statsColumns)) : null;
  return {
    handle(task) {
      const result = gatherBucket(prep, task, stats);
      const c = result.counts;
      const counts = c instanceof Float64Array ? [c.buffer as ArrayBuffer] : [c.index.buffer as ArrayBuffer, c.value.buffer as ArrayBuffer];
      return { result, transfer: [result.data.buffer as ArrayBuffer, ...counts] };
    },
    partStats: async (task) => ({ result: await statsOfPartFile(plan, task) }),
    finish: () => ({ final: stats ? stats.map((t) => t.toJSON()) : null }),
  };
}
