/**
 * Worker entry for both stages of a shuffle: the same threads do stage 1 and then stage 2, so a
 * run starts two threads, not four (each took ~0.1 s of CPU to start here: an isolate, Node's own
 * modules, ours and their WebAssembly, and stage 2's first bucket came back ~0.15 s after its
 * threads were asked for). Messages are answered by their kind (protocol.ts):
 *
 * Stage 1 (src/engine/scatter.ts): one scatter task per thread, alive for the whole stage, since it
 * holds its spill buffers and its counts until the input ends. `batch` is a packed batch read by
 * the main thread, `small` a small input to read here, and `block`, `recheck`, `commit`, `drop`
 * block work (src/io/blocks.ts): this thread parses a block of the input itself and scatters its
 * records once the main thread has checked where the block starts. Buffers go back to the main
 * thread for reuse. The first `finish` hands over the task's result and lets its buffers go.
 *
 * Between the stages, in group mode, `census` counts one bucket's groups from its spill files
 * (src/engine/census-bucket.ts). In either, `split` scatters a share of a bucket too
 * large to take whole into sub-buckets (src/engine/split.ts).
 *
 * Stage 2 (src/engine/gather-lane.ts): `bucket` is one bucket to deal; the plan (plan.json in the
 * spill folder) is read with the first. `partStats` reads a written part back for its statistics
 * (--stats, where the lanes do not keep them as they deal). The second `finish` hands over every
 * part's statistics over the buckets this thread dealt.
 */
import { join } from 'node:path';
import { workerData } from 'node:worker_threads';
import { addSmallInput, ScatterTask, type ScatterTaskConfig } from '../engine/scatter-task.js';
import { unpackBatch } from '../engine/scatter.js';
import { gatherHandlers, gatherLane, type GatherLane } from '../engine/gather-lane.js';
import { BlockHost } from '../io/blocks.js';
import { serveLane } from './lanes.js';
import { byKind, type ShuffleFinal, type ShuffleMessage } from './protocol.js';

const { lane, data } = workerData as { lane: number; data: Omit<ScatterTaskConfig, 'task'> };
let task: ScatterTask | null = new ScatterTask({ ...data, task: lane });
let blocks: BlockHost | null = new BlockHost((batch, input) => task!.addBatch(batch, input));
let gather: GatherLane | null = null;

/** Scatter work, while stage 1 lasts; a failure abandons the task's spill. */
function scattering<A>(work: (task: ScatterTask, blocks: BlockHost) => A): A {
  if (!task || !blocks) throw new Error('scatter work after stage 1 finished');
  try {
    return work(task, blocks);
  } catch (err) {
    task.abandon();
    throw err;
  }
}

serveLane<ShuffleMessage, unknown, ShuffleFinal>(
  byKind<ShuffleMessage>({
    batch: (m) =>
      scattering((t) => {
        const { batch, input } = unpackBatch(m.buffer);
        t.addBatch(batch, input);
        return { result: { kind: 'released', id: -1, buffer: m.buffer }, transfer: [m.buffer] };
      }),
    small: (m) => scattering((t) => ({ result: addSmallInput(t, m) })),
    block: (m) => scattering((_, b) => b.block(m)),
    recheck: (m) => scattering((_, b) => b.recheck(m)),
    commit: (m) => scattering((_, b) => b.commit(m)),
    drop: (m) => scattering((_, b) => b.drop(m)),
    ...gatherHandlers(() => (gather ??= gatherLane(join(data.spillDir, 'plan.json')))),
  }),
  () => {
    if (task) {
      const result = task.finish();
      task = null;
      blocks = null;
      // The counts and chunk lists go over without a copy (thousands of strata: tens of MB a task).
      const lists = [result.chunks, ...(result.census ? [result.census.chunks] : [])].map((a) => a.buffer as ArrayBuffer);
      return { final: { kind: 'scattered', result }, transfer: [...result.bucketCounts.map((a) => a.buffer as ArrayBuffer), ...lists] };
    }
    // A lane that dealt no bucket has no statistics to add.
    return { final: { kind: 'gathered', final: gather ? gather.finish().final : null } };
  },
);
