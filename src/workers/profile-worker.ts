/**
 * Worker entry for `profile`: one ProfileTask per thread, alive for the whole read, since it
 * holds its statistics and stratum counts until `finish`. Messages are answered by their kind
 * (protocol.ts): `batch` is a packed batch read by the main thread, `columns` an input's column
 * map, `small` a small input to read here, and `block`, `recheck`, `commit`, `drop` block work
 * (src/io/blocks.ts): this thread parses a block of the input itself. See src/engine/profile/read.ts
 * for the flow.
 */
import { workerData } from 'node:worker_threads';
import { ProfileTask, type ProfileTaskConfig, type ProfileTaskResult } from '../engine/profile/task.js';
import { unpackBatch } from '../io/packed-batches.js';
import { BlockHost } from '../io/blocks.js';
import { readSmallInput } from '../io/small-inputs.js';
import { serveLane } from './lanes.js';
import { byKind, type ProfileMessage } from './protocol.js';

const { lane, data } = workerData as { lane: number; data: ProfileTaskConfig };
const task = new ProfileTask(data, lane);
const blocks = new BlockHost((batch, input) => task.addBatch(batch, input));

serveLane<ProfileMessage, unknown, ProfileTaskResult>(
  byKind<ProfileMessage>({
    columns: (m) => {
      task.setInputColumns(m.input, m.map);
      return { result: { kind: 'released', id: -1, buffer: new ArrayBuffer(0) } };
    },
    small: (m) => ({ result: readSmallInput(m, (batch) => task.addBatch(batch, m.input)) }),
    batch: (m) => {
      const { batch, input } = unpackBatch(m.buffer);
      task.addBatch(batch, input);
      return { result: { kind: 'released', id: -1, buffer: m.buffer }, transfer: [m.buffer] };
    },
    block: (m) => blocks.block(m),
    recheck: (m) => blocks.recheck(m),
    commit: (m) => blocks.commit(m),
    drop: (m) => blocks.drop(m),
  }),
  () => ({ final: task.finish() }),
);
