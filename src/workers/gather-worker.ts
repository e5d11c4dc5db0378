/**
 * Worker entry for stage 2: one task = one bucket (see src/workers/lanes.ts for the protocol, and
 * src/engine/gather-lane.ts for the work, which small inputs do on the calling thread instead).
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
import { workerData } from 'node:worker_threads';
import type { GatherResult, GatherTask } from '../engine/gather.js';
import { gatherLane, type GatherFinal } from '../engine/gather-lane.js';
import { serveLane } from './lanes.js';

export interface GatherWorkerData {
  planPath: string;
}
export type { GatherFinal };

const { data } = workerData as { lane: number; data: GatherWorkerData };
const lane = gatherLane(data.planPath);

serveLane<GatherTask, GatherResult, GatherFinal>(
  (task) => lane.handle(task),
  () => lane.finish(),
);
