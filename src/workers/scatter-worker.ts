/**
 * Worker entry for stage 1: one scatter task per thread, alive for the whole stage, since it
 * holds its spill buffers and its counts until `finish`. See src/engine/scatter.ts for the flow.
 */
import { parentPort, workerData } from 'node:worker_threads';
import { ScatterTask, unpackBatch, type ScatterReply, type ScatterRequest, type ScatterTaskConfig } from '../engine/scatter.js';
import { toWire } from '../errors.js';

const port = parentPort!;
let task: ScatterTask | null = null;
try {
  task = new ScatterTask(workerData as ScatterTaskConfig);
} catch (err) {
  port.postMessage({ type: 'error', error: toWire(err) } satisfies ScatterReply);
}

port.on('message', (m: ScatterRequest) => {
  if (!task) return;
  try {
    if (m.type === 'batch') {
      const { batch, input } = unpackBatch(m.buffer);
      task.addBatch(batch, input);
      port.postMessage({ type: 'done-batch', buffer: m.buffer } satisfies ScatterReply, [m.buffer]);
    } else {
      const result = task.finish();
      port.postMessage({ type: 'result', result } satisfies ScatterReply);
    }
  } catch (err) {
    task.abandon();
    task = null;
    port.postMessage({ type: 'error', error: toWire(err) } satisfies ScatterReply);
  }
});
