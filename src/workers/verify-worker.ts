/**
 * Worker entry for `verify`: reads whole parts (sha256, records, classes, folds, fingerprints,
 * column statistics) while other threads read others. The manifest arrives once, as
 * workerData; each task is one part. See src/engine/verify.ts and src/engine/verify/scan-parts.ts.
 */
import { workerData } from 'node:worker_threads';
import { partStatsGatherFor, scanPartTask } from '../engine/verify/scan-parts.js';
import type { Manifest } from '../engine/manifest.js';
import type { SerializedStats } from '../core/stats.js';
import { serveLane } from './lanes.js';
import { byKind, type VerifyMessage } from './protocol.js';

const { data } = workerData as { lane: number; data: Manifest };
// With --stats in the manifest: this thread's statistics of the parts it reads, handed over at the end.
const gather = partStatsGatherFor(data);

serveLane<VerifyMessage, unknown, SerializedStats | null>(
  byKind<VerifyMessage>({
    part: async (task) => {
      const result = await scanPartTask(data, task, gather);
      return { result, transfer: [result.strata.buffer as ArrayBuffer, result.folds.buffer as ArrayBuffer, result.foldStrata.buffer as ArrayBuffer, ...(result.hashes ? [result.hashes.buffer as ArrayBuffer] : [])] };
    },
  }),
  () => ({ final: gather ? gather.whole.toTransfer() : null }),
);
