/**
 * The gather step, as the pipeline and the cluster's gather tasks run it: the buckets of a range
 * dealt on the lanes, a bounded number in flight, their results handed to a sink in bucket order
 * (part files, spread work files, a task's slices), with every part's counts and fingerprints
 * added up. The lanes keep every part's statistics where the plan says so (part-stats.ts). A
 * bucket too large to deal whole is split first (split.ts) and dealt as its sub-buckets, in order;
 * the next bucket's split starts while the sub-buckets of the one before are dealt.
 */
import { Fingerprint } from '../core/hash.js';
import type { GatherLanes, BucketMessage } from '../workers/protocol.js';
import { addCounts, type GatherResult } from './gather.js';
import { gatherLane, inlineGatherLanes, type GatherLane } from './gather-lane.js';
import { partCount, type GatherPlan } from './plan.js';
import type { SpillPiece } from './spill.js';
import { splitPolicy, unitsOf, type GatherUnit, type SplitSettings } from './split.js';

/** Takes each bucket's result, in bucket order; the result's buffers go back to the lanes afterwards. */
export interface GatherSink {
  take(r: GatherResult): Promise<void>;
}

export interface GatherStageInput {
  plan: GatherPlan;
  planPath: string;
  /** Bucket b's pieces of the spill. */
  piecesOf: (bucket: number) => SpillPiece[];
  /** `bucketCounts[stratum][bucket]` by dealing stratum: the ranks each bucket starts at follow from them. */
  countsOf: (bucket: number, addTo: Float64Array) => void;
  /** The buckets dealt here: [first, end). */
  first: number;
  end: number;
  /** Each stratum's rank at bucket `first` (the sum of its counts in the buckets before). */
  rankStart: Float64Array;
  /** The worker lanes, or null to deal on this thread. */
  lanes: GatherLanes | null;
  /** Buckets dealt at once. */
  inFlight: number;
  sink: GatherSink;
  /** Called once the buckets before `next` are dealt and handed over (the spill can shrink). */
  passed?: (next: number) => Promise<void>;
  progress?: (done: number, total: number) => void;
  /**
   * Buckets larger than `cap` are split (the multi-pass layout; split.ts) into files in `dir`
   * (nameless, gone at the end); absent: every bucket is dealt whole.
   */
  split?: SplitSettings;
}

export interface GatherStage {
  /** Records per (part, fold, stratum): `[(part * K + fold) * strata + s]`. */
  counts: Float64Array;
  /** Per part, of the records written. */
  fingerprints: Fingerprint[];
  /** With ROWDECK_PHASES=1: milliseconds per phase of gatherBucket, summed. */
  phases: number[];
  /** The lanes the buckets were dealt on (the inline one when there were no workers): the caller finishes them. */
  lanes: GatherLanes;
  /** The inline lane, when the calling thread dealt. */
  inline: GatherLane | null;
  /** Buckets split before they were dealt. */
  splits: number;
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
    lanes = inlineGatherLanes(lane);
  }
  const run = lanes;
  const counts = new Float64Array(parts * K * plan.strataCount);
  const fingerprints = Array.from({ length: parts }, () => new Fingerprint());
  const phases: number[] = [];
  let splits = 0;
  const { policy, slots } = splitPolicy(
    i.split && {
      ...i.split,
      onSplit: () => {
        splits++;
        i.split!.onSplit?.();
      },
    },
    { shares: run.size, strata: plan.localToGlobal, strataCount: plan.strataCount, run: (t) => run.run(t) },
  );
  // Each bucket's units, asked for in order; the next bucket's are asked for as soon as the
  // current one's are, so its split (if any) runs beside the dealing.
  const expansions = new Map<number, Promise<GatherUnit[]>>();
  const expand = (b: number): Promise<GatherUnit[]> => {
    let e = expansions.get(b);
    if (!e) {
      e = unitsOf(b, i.piecesOf(b), plan.bits, policy);
      e.catch(() => {});
      expansions.set(b, e);
    }
    return e;
  };
  let current: GatherUnit[] = [];
  let at = 0;
  let nextBucket = i.first;
  const nextUnit = async (): Promise<GatherUnit | null> => {
    while (at >= current.length) {
      if (nextBucket >= i.end) return null;
      const b = nextBucket++;
      current = await expand(b);
      expansions.delete(b);
      at = 0;
      if (nextBucket < i.end) expand(nextBucket);
    }
    return current[at++]!;
  };
  // Rank of each stratum's first record in a unit: prefix sums, taken as units are handed out (in order).
  const running = Float64Array.from(i.rankStart);
  const rankStartOf = (u: GatherUnit): Float64Array => {
    const start = Float64Array.from(running);
    if (u.counts) for (let s = 0; s < u.counts.length; s++) running[s]! += u.counts[s]!;
    else i.countsOf(u.bucket, running);
    return start;
  };
  const pending: { unit: GatherUnit; result: Promise<GatherResult> }[] = [];
  // Output buffers come back from the workers and are handed out again (see GatherTask.arena in gather.ts).
  const spare: ArrayBuffer[] = [];
  const submit = (u: GatherUnit): void => {
    const task: BucketMessage = { kind: 'bucket', bucket: u.bucket, pieces: u.pieces, rankStart: rankStartOf(u) };
    if (u.shared !== plan.bits) task.shared = u.shared;
    const arena = spare.pop();
    if (arena) task.arena = arena;
    // The rank starts go over without a copy (with thousands of strata they are tens of KB a bucket).
    const p = run.run(task, arena ? [arena, task.rankStart.buffer as ArrayBuffer] : [task.rankStart.buffer as ArrayBuffer]);
    p.catch(() => {});
    pending.push({ unit: u, result: p });
  };
  const fill = async (): Promise<void> => {
    while (pending.length < i.inFlight) {
      const u = await nextUnit();
      if (!u) return;
      submit(u);
    }
  };
  const total = i.end - i.first;
  i.progress?.(0, total);
  try {
    await fill();
    while (pending.length > 0) {
      const { unit, result } = pending.shift()!;
      const r = await result;
      await i.sink.take(r);
      for (let p = 0; p < parts; p++) fingerprints[p]!.merge(r.fingerprints[p]!);
      addCounts(counts, r.counts);
      r.phases?.forEach((ms, k) => (phases[k] = (phases[k] ?? 0) + ms));
      spare.push(r.data.buffer as ArrayBuffer);
      for (const release of unit.cleanup) release();
      // The last unit of a bucket: the bucket is passed.
      const last = pending.length > 0 ? pending[0]!.unit.bucket !== unit.bucket : at >= current.length || current[at]!.bucket !== unit.bucket;
      if (last) {
        await i.passed?.(unit.bucket + 1);
        i.progress?.(unit.bucket + 1 - i.first, total);
      }
      await fill();
    }
  } finally {
    // Splits still running (the next bucket's, after a failure) end before their files close.
    await Promise.allSettled([...expansions.values(), ...pending.map((p) => p.result)]);
    slots?.close();
  }
  return { counts, fingerprints, phases, lanes: run, inline, splits };
}
