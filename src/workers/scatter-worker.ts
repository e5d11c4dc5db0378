/**
 * Worker entry for stage 1: one scatter task per thread, alive for the whole stage, since it
 * holds its spill buffers and its counts until the input ends (see src/engine/scatter.ts).
 * A task is a packed batch read by the main thread, or block work (src/io/blocks.ts): this
 * thread parses a block of the input itself and scatters its records once the main thread has
 * checked where the block starts. Buffers go back to the main thread for reuse.
 */
import { workerData } from 'node:worker_threads';
import { ScatterTask, unpackBatch, type ScatterMessage, type ScatterTaskConfig, type ScatterTaskResult } from '../engine/scatter.js';
import { BlockHost, type BlockReply } from '../io/blocks.js';
import { serveLane } from './lanes.js';

const { lane, data } = workerData as { lane: number; data: Omit<ScatterTaskConfig, 'task'> };
const task = new ScatterTask({ ...data, task: lane });
const blocks = new BlockHost((batch, input) => task.addBatch(batch, input));

serveLane<ScatterMessage, BlockReply, ScatterTaskResult>(
  (m) => {
    try {
      if (m.kind !== 'batch') return blocks.handle(m);
      const { batch, input } = unpackBatch(m.buffer);
      task.addBatch(batch, input);
      return { result: { kind: 'released', id: -1, buffer: m.buffer }, transfer: [m.buffer] };
    } catch (err) {
      task.abandon();
      throw err;
    }
  },
  () => ({ final: task.finish() }),
);
