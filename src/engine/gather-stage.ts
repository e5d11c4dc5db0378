/**
 * The gather step, as the pipeline and the cluster's gather tasks run it: the buckets of a range
 * dealt on the lanes, a bounded number in flight, their results handed to a sink in bucket order
 * (part files, spread work files, a task's slices), with every part's counts and fingerprints
 * added up. The lanes keep every part's statistics where the plan says so (part-stats.ts).
 */
import { Fingerprint } from '../core/hash.js';
import { RowdeckError } from '../errors.js';
import { InlineLanes, type Lanes } from '../workers/lanes.js';
import { addCounts, type GatherResult, type GatherTask } from './gather.js';
import { gatherLane, type GatherFinal, type GatherLane } from './gather-lane.js';
import { partCount, type GatherPlan } from './plan.js';
import type { SpillPiece } from './spill.js';

/** Takes each bucket's result, in bucket order; the result's buffers go back to the lanes afterwards. */
export interface GatherSink {
  take(r: GatherResult): Promise<void>;
}

export interface GatherStageInput {
  plan: GatherPlan;
  planPath: string;
  /** Per bucket (all of them): its pieces of the spill. */
  bucketPieces: SpillPiece[][];
  /** `bucketCounts[stratum][bucket]` by dealing stratum: the ranks each bucket starts at follow from them. */
  countsOf: (bucket: number, addTo: Float64Array) => void;
  /** The buckets dealt here: [first, end). */
  first: number;
  end: number;
  /** Each stratum's rank at bucket `first` (the sum of its counts in the buckets before). */
  rankStart: Float64Array;
  /** The worker lanes, or null to deal on this thread. */
  lanes: Lanes<GatherTask, GatherResult, GatherFinal> | null;
  /** Buckets dealt at once. */
  inFlight: number;
  sink: GatherSink;
  /** Called once the buckets before `next` are dealt and handed over (the spill can shrink). */
  passed?: (next: number) => Promise<void>;
  progress?: (done: number, total: number) => void;
}

export interface GatherStage {
  /** Records per (part, fold, stratum): `[(part * K + fold) * strata + s]`. */
  counts: Float64Array;
  /** Per part, of the records written. */
  fingerprints: Fingerprint[];
  /** With ROWDECK_PHASES=1: milliseconds per phase of gatherBucket, summed. */
  phases: number[];
  /** The lanes the buckets were dealt on (the inline one when there were no workers): the caller finishes them. */
  lanes: Lanes<GatherTask, GatherResult, GatherFinal>;
  /** The inline lane, when the calling thread dealt. */
  inline: GatherLane | null;
}

export async function runGatherStage(i: GatherStageInput): Promise<GatherStage> {
  const { plan } = i;
  const parts = partCount(plan.deal);
  const K = plan.deal.folds;
  let inline: GatherLane | null = null;
  let lanes = i.lanes;
  if (!lanes) {
    const lane = gatherLane(i.planPath);
    inline = lane;
    lanes = new InlineLanes<GatherTask, GatherResult, GatherFinal>((t) => lane.handle(t), () => lane.finish());
  }
  const counts = new Float64Array(parts * K * plan.strataCount);
  const fingerprints = Array.from({ length: parts }, () => new Fingerprint());
  const phases: number[] = [];
  // Rank of each stratum's first record in a bucket: prefix sums, taken as buckets are handed out (in order).
  const running = Float64Array.from(i.rankStart);
  let ranked = i.first;
  const rankStartOf = (b: number): Float64Array => {
    if (b !== ranked) throw new RowdeckError('RDK_INTERNAL', `bucket ${b} handed out before bucket ${ranked}`);
    const start = Float64Array.from(running);
    i.countsOf(b, running);
    ranked++;
    return start;
  };
  const pending = new Map<number, Promise<GatherResult>>();
  // Output buffers come back from the workers and are handed out again (see GatherTask.arena).
  const spare: ArrayBuffer[] = [];
  const run = lanes;
  const submit = (b: number): void => {
    const task: GatherTask = { bucket: b, pieces: i.bucketPieces[b]!, rankStart: rankStartOf(b) };
    const arena = spare.pop();
    if (arena) task.arena = arena;
    // The rank starts go over without a copy (with thousands of strata they are tens of KB a bucket).
    const p = run.run(task, arena ? [arena, task.rankStart.buffer as ArrayBuffer] : [task.rankStart.buffer as ArrayBuffer]);
    p.catch(() => {});
    pending.set(b, p);
  };
  let next = i.first;
  const total = i.end - i.first;
  i.progress?.(0, total);
  while (next < i.end && next - i.first < i.inFlight) submit(next++);
  for (let b = i.first; b < i.end; b++) {
    const r = await pending.get(b)!;
    pending.delete(b);
    await i.sink.take(r);
    for (let p = 0; p < parts; p++) fingerprints[p]!.merge(r.fingerprints[p]!);
    addCounts(counts, r.counts);
    r.phases?.forEach((ms, k) => (phases[k] = (phases[k] ?? 0) + ms));
    spare.push(r.data.buffer as ArrayBuffer);
    await i.passed?.(b + 1);
    if (next < i.end) submit(next++);
    i.progress?.(b + 1 - i.first, total);
  }
  return { counts, fingerprints, phases, lanes, inline };
}
