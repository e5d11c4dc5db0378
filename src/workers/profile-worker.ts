/**
 * Worker entry for `profile`: one ProfileTask per thread, alive for the whole read, since it
 * holds its statistics and stratum counts until `finish`. A task is a packed batch read by the
 * main thread, an input's column map, or block work (src/io/blocks.ts): this thread parses a
 * block of the input itself. See src/engine/profile/read.ts for the flow.
 */
import { workerData } from 'node:worker_threads';
import { ProfileTask, type ProfileMessage, type ProfileTaskConfig, type ProfileTaskResult } from '../engine/profile/task.js';
import { unpackBatch } from '../io/packed-batches.js';
import { BlockHost, type BlockReply } from '../io/blocks.js';
import { readSmallInput, type SmallInputReply } from '../io/small-inputs.js';
import { serveLane } from './lanes.js';

const { lane, data } = workerData as { lane: number; data: ProfileTaskConfig };
const task = new ProfileTask(data, lane);
const blocks = new BlockHost((batch, input) => task.addBatch(batch, input));

serveLane<ProfileMessage, BlockReply | SmallInputReply, ProfileTaskResult>(
  (m) => {
    if (m.kind === 'columns') {
      task.setInputColumns(m.input, m.map);
      return { result: { kind: 'released', id: -1, buffer: new ArrayBuffer(0) } };
    }
    if (m.kind === 'small') return { result: readSmallInput(m, (batch) => task.addBatch(batch, m.input)) };
    if (m.kind !== 'batch') return blocks.handle(m);
    const { batch, input } = unpackBatch(m.buffer);
    task.addBatch(batch, input);
    return { result: { kind: 'released', id: -1, buffer: m.buffer }, transfer: [m.buffer] };
  },
  () => ({ final: task.finish() }),
);
