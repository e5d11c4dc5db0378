/**
 * Worker entry for stage 1: one scatter task per thread, alive for the whole stage, since it
 * holds its spill buffers and its counts until the input ends (see src/engine/scatter.ts).
 * A task is one packed batch; its buffer goes back to the main thread for reuse.
 */
import { workerData } from 'node:worker_threads';
import { ScatterTask, unpackBatch, type ScatterTaskConfig, type ScatterTaskResult } from '../engine/scatter.js';
import { serveLane } from './lanes.js';

const { lane, data } = workerData as { lane: number; data: Omit<ScatterTaskConfig, 'task'> };
const task = new ScatterTask({ ...data, task: lane });

serveLane<ArrayBuffer, ArrayBuffer, ScatterTaskResult>(
  (buffer) => {
    const { batch, input } = unpackBatch(buffer);
    try {
      task.addBatch(batch, input);
    } catch (err) {
      task.abandon();
      throw err;
    }
    return { result: buffer, transfer: [buffer] };
  },
  () => ({ final: task.finish() }),
);
