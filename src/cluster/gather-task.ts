/**
 * A gather task of a plan: stage 2 over its range of buckets (src/engine/gather-stage.ts), on this
 * machine's threads, reading only those buckets' pieces from every scatter task. Each part's
 * bytes go to a file of its own in the task's folder (`--order spread`: the class-by-class work
 * files), and the done record holds the counts, fingerprints and, where the lanes keep them, every
 * part's column statistics over these buckets. Finish joins the tasks' files in bucket order.
 */
import { readFileSync, rmSync } from 'node:fs';
import { join } from 'node:path';
import { RowdeckError } from '../errors.js';
import { FileSlots, PartWriter } from '../io/part-writer.js';
import { choosePartFileSlots } from '../io/open-files.js';
import type { SerializedStats } from '../core/stats.js';
import { runGatherStage, type GatherSink } from '../engine/gather-stage.js';
import { partCount, type GatherPlan } from '../engine/plan.js';
import { SpreadParts, type SpreadChunk } from '../engine/spread-parts.js';
import { spreadSink } from '../engine/parts.js';
import { taskCommand } from './commands.js';
import { dealLanes } from './lanes.js';
import { gatherFinals } from '../workers/protocol.js';
import { gatherShareFile, readShare, runDealTask } from './deal.js';
import { enterPlan, type ClusterPlan } from './plan.js';
import { readDone, runTask, taskDir, type DoneRecord } from './records.js';

export const partSliceFile = (part: number): string => `part-${String(part).padStart(5, '0')}.bin`;

export interface GatherDone extends DoneRecord {
  first: number;
  end: number;
  counts: Float64Array;
  fingerprints: { hi: number; lo: number; count: number }[];
  /** Bytes of each part's slice file. */
  partBytes: number[];
  /** `--order spread`: each unit's chunks in the task's work files. */
  spread: SpreadChunk[][] | null;
  /** Where the lanes kept every part's statistics: each part's, over these buckets. */
  stats: SerializedStats[] | null;
  /** Buckets split before they were dealt (the multi-pass layout). */
  splits: number;
}

/** The deal step's plan of stage 2, or an error saying to run it. */
export function dealPlan(plan: ClusterPlan): { gatherPlan: GatherPlan; dir: string } {
  const done = readDone(plan.work, 'deal', 0);
  if (!done || done.planId !== plan.planId) {
    throw new RowdeckError('RDK_TASKS_INCOMPLETE', `The deal step of this plan has not run. Run it first: ${taskCommand(plan, 'deal')}`, {});
  }
  const dir = taskDir(plan.work, 'deal', 0);
  return { gatherPlan: JSON.parse(readFileSync(join(dir, 'plan.json'), 'utf8')) as GatherPlan, dir };
}

export async function runGatherTask(plan: ClusterPlan, index: number): Promise<boolean> {
  // Stage 2 reads the spill only.
  enterPlan(plan, []);
  const g = plan.gather[index];
  if (!g) throw new RowdeckError('RDK_INTERNAL', `gather task ${index} is not in the plan`);
  // The last scatter task makes the deal; where it did not (killed after its own work, say), the
  // gather task that finds none makes it (tasks at once each may: the first to finish keeps it).
  if (readDone(plan.work, 'gather', index) === null && readDone(plan.work, 'deal', 0) === null) await runDealTask(plan);
  const { gatherPlan, dir: dealDir } = dealPlan(plan);
  const share = readShare(join(dealDir, gatherShareFile(index)));
  return runTask<Omit<GatherDone, keyof DoneRecord>>(plan.work, 'gather', index, plan.planId, async (dir) => {
    const parts = partCount(gatherPlan.deal);
    const S = gatherPlan.strataCount;
    const spread = gatherPlan.order === 'spread' ? new SpreadParts(dir, parts, S) : null;
    const slots = new FileSlots(choosePartFileSlots());
    const writers = spread ? [] : Array.from({ length: parts }, (_, p) => new PartWriter(join(dir, partSliceFile(p)), null, 64 * 1024, slots, false));
    const sink: GatherSink = spread
      ? spreadSink(spread)
      : {
          async take(r) {
            for (let p = 0; p < parts; p++) {
              const a = r.partStart[p]!;
              const e = r.partStart[p + 1]!;
              if (e > a) await writers[p]!.write(new Uint8Array(r.data.buffer, r.data.byteOffset + a, e - a));
            }
          },
        };
    const lanes = await dealLanes(plan.size.threads, dealDir);
    const pieces = new Array(gatherPlan.buckets);
    share.pieces.forEach((p, i) => (pieces[share.first + i] = p));
    try {
      const gathered = await runGatherStage({
        plan: gatherPlan,
        planPath: join(dealDir, 'plan.json'),
        piecesOf: (b) => pieces[b]!,
        countsOf: (b, running) => {
          const at = (b - share.first) * S;
          for (let s = 0; s < S; s++) running[s]! += share.counts[at + s]!;
        },
        first: share.first,
        end: share.end,
        rankStart: share.rankStart,
        lanes,
        inFlight: plan.size.inFlight,
        sink,
        // Buckets too large for this machine's budget are split in a folder of the task's own, removed as they are dealt.
        split: { cap: plan.size.bucketCap, target: plan.size.bucketTarget, dir: join(dir, 'splits'), bufferBytes: Math.floor(plan.size.memory / 4) },
      });
      rmSync(join(dir, 'splits'), { recursive: true, force: true });
      const partBytes: number[] = [];
      for (const w of writers) partBytes.push((await w.close()).bytes);
      const finals = gatherFinals(await gathered.lanes.finish());
      let stats: SerializedStats[] | null = null;
      if (gatherPlan.statsInLanes) {
        // Every lane's tables of every part, as plain data; finish merges them (exactly, in any order).
        const perLane = finals.filter((f) => f?.kind === 'parts');
        stats = perLane.length > 0 ? perLane.flatMap((f) => f.parts) : [];
      }
      await gathered.lanes.destroy();
      const chunks = spread ? spread.chunkList() : null;
      spread?.close();
      return { first: share.first, end: share.end, counts: gathered.counts, fingerprints: gathered.fingerprints.map((f) => f.toJSON()), partBytes, spread: chunks, stats, splits: gathered.splits };
    } catch (err) {
      for (const w of writers) w.abandon();
      spread?.close();
      await lanes?.destroy().catch(() => {});
      throw err;
    }
  });
}
