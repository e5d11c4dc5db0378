/** The worker lanes of a plan's deal, gather and finish steps. */
import { WorkerLanes } from '../workers/lanes.js';
import { resolveWorkerFile } from '../workers/worker-file.js';
import { scatterFinals, type ShuffleLanes } from '../workers/protocol.js';
import { idleScatterConfig } from '../engine/scatter.js';

/**
 * Lanes that deal buckets (and read parts back for statistics, or count groups) with the deal
 * step's plan. The worker entry starts as a scatter task; with nothing to scatter, that task is
 * finished at once, so the lanes' next `finish` hands over what stage 2 kept.
 */
export async function dealLanes(threads: number, dealDir: string): Promise<ShuffleLanes | null> {
  if (threads === 0) return null;
  const lanes: ShuffleLanes = new WorkerLanes(resolveWorkerFile(), threads, idleScatterConfig(dealDir));
  scatterFinals(await lanes.finish());
  return lanes;
}

