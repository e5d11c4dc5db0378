/**
 * Worker entry for `profile`: one ProfileTask per thread, alive for the whole read, since it
 * holds its statistics and stratum counts until `finish`. See src/engine/profile.ts for the flow.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { ProfileTask, type ProfileReply, type ProfileRequest, type ProfileTaskConfig } from '../engine/profile.js';
import { unpackBatch } from '../engine/scatter.js';
import { toWire } from '../errors.js';

const port = parentPort!;
let task: ProfileTask | null = null;
try {
  task = new ProfileTask(workerData as ProfileTaskConfig);
} catch (err) {
  port.postMessage({ type: 'error', error: toWire(err) } satisfies ProfileReply);
}

port.on('message', (m: ProfileRequest) => {
  if (!task) return;
  try {
    if (m.type === 'batch') {
      const { batch, input } = unpackBatch(m.buffer);
      task.addBatch(batch, input);
      port.postMessage({ type: 'done-batch', buffer: m.buffer } satisfies ProfileReply, [m.buffer]);
    } else if (m.type === 'columns') {
      task.setInputColumns(m.input, m.map);
    } else {
      port.postMessage({ type: 'result', result: task.finish() } satisfies ProfileReply);
    }
  } catch (err) {
    task = null;
    port.postMessage({ type: 'error', error: toWire(err) } satisfies ProfileReply);
  }
});
