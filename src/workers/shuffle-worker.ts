/**
 * Worker entry for both stages of a shuffle: the same threads do stage 1 and then stage 2, so a
 * run starts two threads, not four (each took ~0.1 s of CPU to start here: an isolate, Node's own
 * modules, ours and their WebAssembly, and stage 2's first bucket came back ~0.15 s after its
 * threads were asked for).
 *
 * Stage 1 (src/engine/scatter.ts): one scatter task per thread, alive for the whole stage, since it
 * holds its spill buffers and its counts until the input ends. A task is a packed batch read by
 * the main thread, or block work (src/io/blocks.ts): this thread parses a block of the input
 * itself and scatters its records once the main thread has checked where the block starts.
 * Buffers go back to the main thread for reuse. The first `finish` hands over the task's result
 * and lets its buffers go.
 *
 * Between the stages, in group mode, a task with `census` counts one bucket's groups from its
 * spill files (censusBucket in src/engine/gather.ts). In either, a task with `splitDir` scatters
 * a share of a bucket too large to take whole into sub-buckets (src/engine/split.ts).
 *
 * Stage 2 (src/engine/gather-lane.ts): a task with a `bucket` is one bucket to deal; the plan
 * (plan.json in the spill folder) is read with the first. A task with a `partFile` reads a
 * written part back for its statistics (--stats, where the lanes do not keep them as they deal).
 * The second `finish` hands over every part's statistics over the buckets this thread dealt.
 */
import { join } from 'node:path';
import { workerData } from 'node:worker_threads';
import { addSmallInput, ScatterTask, unpackBatch, type ScatterMessage, type ScatterTaskConfig, type ScatterTaskResult } from '../engine/scatter.js';
import type { SmallInputReply } from '../io/small-inputs.js';
import { censusBucket, type CensusTask, type GatherResult, type GatherTask } from '../engine/gather.js';
import type { GroupTableData } from '../core/group-table.js';
import { gatherLane, type GatherFinal, type GatherLane } from '../engine/gather-lane.js';
import type { PartStatsResult, PartStatsTask } from '../engine/part-stats.js';
import { BlockHost, type BlockReply } from '../io/blocks.js';
import { splitPieces, type SplitResult, type SplitTask } from '../engine/split.js';
import { serveLane } from './lanes.js';

const { lane, data } = workerData as { lane: number; data: Omit<ScatterTaskConfig, 'task'> };
let task: ScatterTask | null = new ScatterTask({ ...data, task: lane });
let blocks: BlockHost | null = new BlockHost((batch, input) => task!.addBatch(batch, input));
let gather: GatherLane | null = null;

serveLane<ScatterMessage | GatherTask | PartStatsTask | CensusTask | SplitTask, BlockReply | SmallInputReply | GatherResult | PartStatsResult | GroupTableData | SplitResult, ScatterTaskResult | GatherFinal>(
  (m) => {
    if ('splitDir' in m) {
      const r = splitPieces(m);
      return { result: r, transfer: [r.chunks.buffer as ArrayBuffer, ...(r.counts ? [r.counts.buffer as ArrayBuffer] : [])] };
    }
    if ('bucket' in m) {
      gather ??= gatherLane(join(data.spillDir, 'plan.json'));
      return gather.handle(m);
    }
    if ('census' in m) {
      const g = censusBucket(m);
      return { result: g, transfer: [g.hi, g.lo, g.records, g.first, g.extra].map((a) => a.buffer as ArrayBuffer) };
    }
    if ('partFile' in m) {
      gather ??= gatherLane(join(data.spillDir, 'plan.json'));
      return gather.partStats(m);
    }
    if (!task || !blocks) throw new Error('scatter work after stage 1 finished');
    try {
      if (m.kind === 'small') return { result: addSmallInput(task, m) };
      if (m.kind !== 'batch') return blocks.handle(m);
      const { batch, input } = unpackBatch(m.buffer);
      task.addBatch(batch, input);
      return { result: { kind: 'released', id: -1, buffer: m.buffer }, transfer: [m.buffer] };
    } catch (err) {
      task.abandon();
      throw err;
    }
  },
  () => {
    if (task) {
      const final = task.finish();
      task = null;
      blocks = null;
      // The counts and chunk lists go over without a copy (thousands of strata: tens of MB a task).
      const lists = [final.chunks, ...(final.census ? [final.census.chunks] : [])].map((a) => a.buffer as ArrayBuffer);
      return { final, transfer: [...final.bucketCounts.map((a) => a.buffer as ArrayBuffer), ...lists] };
    }
    // A lane that dealt no bucket has no statistics to add.
    return gather ? gather.finish() : { final: null };
  },
);
