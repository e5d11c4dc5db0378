/** The worker lanes of a plan's deal, gather and finish steps. */
import { WorkerLanes, type Lanes } from '../workers/lanes.js';
import { resolveWorkerFile } from '../workers/worker-file.js';
import type { GatherResult, GatherTask } from '../engine/gather.js';
import type { GatherFinal } from '../engine/gather-lane.js';
import { idleScatterConfig } from '../engine/scatter.js';

/**
 * Lanes that deal buckets (and read parts back for statistics, or count groups) with the deal
 * step's plan. The worker entry starts as a scatter task; with nothing to scatter, that task is
 * finished at once, so the lanes' next `finish` hands over what stage 2 kept.
 */
export async function dealLanes(threads: number, dealDir: string): Promise<Lanes<GatherTask, GatherResult, GatherFinal> | null> {
  if (threads === 0) return null;
  const lanes = new WorkerLanes<GatherTask, GatherResult, GatherFinal>(resolveWorkerFile(), threads, idleScatterConfig(dealDir));
  await lanes.finish();
  return lanes;
}

