/**
 * Worker entry for `verify`: reads whole parts (sha256, records, classes, folds, fingerprints)
 * while other threads read others. The manifest arrives once, as workerData; each task is one
 * part. See src/engine/verify.ts.
 */
import { workerData } from 'node:worker_threads';
import { scanPartTask, type SerializedPartScan, type VerifyPartTask } from '../engine/verify.js';
import type { Manifest } from '../engine/manifest.js';
import { serveLane } from './lanes.js';

const { data } = workerData as { lane: number; data: Manifest };

serveLane<VerifyPartTask, SerializedPartScan, null>(
  async (task) => {
    const result = await scanPartTask(data, task);
    return { result, transfer: [result.strata.buffer as ArrayBuffer, result.folds.buffer as ArrayBuffer, result.foldStrata.buffer as ArrayBuffer, ...(result.hashes ? [result.hashes.buffer as ArrayBuffer] : [])] };
  },
  () => ({ final: null }),
);
