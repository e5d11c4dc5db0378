/**
 * What one lane of stage 2 does, wherever it runs: on a worker thread (src/workers/shuffle-worker.ts)
 * or, for small inputs, on the calling thread (see `InlineLanes`). It reads the plan with its
 * first bucket, deals each bucket it is given, and keeps every part's statistics until the end
 * (or, where they would take too much memory, reads the parts back one at a time afterwards).
 */
import { closeSync, openSync, readFileSync, readSync } from 'node:fs';
import { ioError, RowdeckError } from '../errors.js';
import { dirname, join } from 'node:path';
import { TableStats, type SerializedStats } from '../core/stats.js';
import { censusBucket } from './census-bucket.js';
import { gatherBucket, preparePlan, type GatherResult, type GatherTask, type BucketGroups, type GroupRows, type PreparedPlan } from './gather.js';
import { PartStatsGather, statsOfPartFile, type PartStatsResult, type PartStatsTask } from './part-stats.js';
import type { GatherPlan } from './plan.js';
import { splitPieces } from './split.js';
import { InlineLanes, type Lanes } from '../workers/lanes.js';
import { byKind, type GatherMessage, type HandlerTable, type ShuffleFinal } from '../workers/protocol.js';

/**
 * What a lane hands over at the end of stage 2 with `--stats`: every part's statistics over the
 * buckets it dealt (where the lanes keep them), or its table of the parts it read back (merged
 * as it read them); null without --stats.
 */
export type GatherFinal = { kind: 'parts'; parts: SerializedStats[] } | { kind: 'readBack'; readBack: SerializedStats } | null;

export function loadGatherPlan(planPath: string): PreparedPlan {
  const plan = JSON.parse(readFileSync(planPath, 'utf8')) as GatherPlan;
  const file = plan.groupsFile ? join(dirname(planPath), plan.groupsFile) : null;
  if (file && plan.groupStarts === null) {
    // Records placed individually (GatherPlan.cellKeyInHeader): any bucket may hold any group.
    let all: GroupRows | null = null;
    return preparePlan(plan, () => (all ??= readAllGroups(file)));
  }
  return preparePlan(plan, file ? (bucket) => readBucketGroups(file, plan.groupStarts!, bucket) : null);
}

/** The whole group table (see GroupRows), read from groups.bin's three columns. */
function readAllGroups(file: string): GroupRows {
  let bytes: Buffer;
  try {
    bytes = readFileSync(file);
  } catch (err) {
    throw ioError(err, file, 'reading the group table');
  }
  const n = bytes.length / 12;
  // Typed views need 4-byte alignment, which a Buffer from a pool may not have.
  if (bytes.byteOffset % 4 !== 0) bytes = Buffer.from(bytes);
  const col = (k: number): Uint32Array => new Uint32Array(bytes.buffer, bytes.byteOffset + 4 * n * k, n);
  const [hi, lo, cell] = [col(0), col(1), col(2)];
  const rows = new Uint32Array(3 * n);
  for (let k = 0; k < n; k++) {
    rows[3 * k] = hi[k]!;
    rows[3 * k + 1] = lo[k]!;
    rows[3 * k + 2] = cell[k]!;
  }
  let dirBits = 1;
  while (dirBits < 24 && 2 ** (dirBits + 2) < n) dirBits++;
  const dir = new Uint32Array(2 ** dirBits + 1);
  const shift = 32 - dirBits;
  for (let k = 0; k < n; k++) dir[(hi[k]! >>> shift) + 1]!++;
  for (let d = 0; d < 2 ** dirBits; d++) dir[d + 1]! += dir[d]!;
  return { rows, dir, dirShift: shift };
}

/**
 * The groups whose keys fall in one bucket: the file holds every group's key high words, then
 * low words, then cells, each column sorted by key, and a bucket's groups are a run of it
 * (`starts[b]` up to `starts[b + 1]`). A lane reads 12 bytes a group of its bucket, not the
 * whole table (10 M groups: 120 MB a lane).
 */
function readBucketGroups(file: string, starts: number[], bucket: number): BucketGroups {
  const from = starts[bucket]!;
  const n = starts[bucket + 1]! - from;
  const total = starts[starts.length - 1]!;
  const buf = new ArrayBuffer(12 * n);
  const fd = openSync(file, 'r');
  try {
    for (let col = 0; col < 3; col++) {
      const view = new Uint8Array(buf, 4 * n * col, 4 * n);
      let got = 0;
      while (got < view.length) {
        const r = readSync(fd, view, got, view.length - got, 4 * (col * total + from) + got);
        if (r === 0) throw new RowdeckError('RDK_INTERNAL', `${file} is shorter than its plan says: the spill folder was changed during the run.`);
        got += r;
      }
    }
  } catch (err) {
    throw ioError(err, file, 'reading the group table');
  } finally {
    closeSync(fd);
  }
  return { keyHi: new Uint32Array(buf, 0, n), keyLo: new Uint32Array(buf, 4 * n, n), cell: new Uint32Array(buf, 8 * n, n) };
}

export interface GatherLane {
  /** Deals one bucket; the result's bytes may be handed over without copying. */
  handle(task: GatherTask): { result: GatherResult; transfer: ArrayBuffer[] };
  /** One part's statistics, read back from its file once every bucket is dealt: its summary (the table stays with the lane). */
  partStats(task: PartStatsTask): Promise<{ result: PartStatsResult }>;
  /** The statistics this lane kept (see GatherFinal). */
  finish(): { final: GatherFinal };
}

export function gatherLane(planPath: string): GatherLane {
  const prep = loadGatherPlan(planPath);
  const { plan } = prep;
  const stats = plan.statsColumns.length > 0 && plan.statsInLanes ? Array.from({ length: plan.deal.splits.length * plan.deal.partitions }, () => new TableStats(plan.statsColumns)) : null;
  // The parts this lane reads back (see PartStatsGather).
  let readBack: PartStatsGather | null = null;
  return {
    handle(task) {
      const result = gatherBucket(prep, task, stats);
      const c = result.counts;
      const counts = c instanceof Float64Array ? [c.buffer as ArrayBuffer] : [c.index.buffer as ArrayBuffer, c.value.buffer as ArrayBuffer];
      const spread = result.spread ? [result.spread.sizes.buffer as ArrayBuffer, result.spread.records.buffer as ArrayBuffer] : [];
      return { result, transfer: [result.data.buffer as ArrayBuffer, ...counts, ...spread] };
    },
    partStats: async (task) => {
      readBack ??= new PartStatsGather(plan.statsColumns);
      const t = await statsOfPartFile(plan, task, readBack.take());
      return { result: { summary: readBack.done(t, task.excludeValues) } };
    },
    finish: () => ({ final: stats ? { kind: 'parts', parts: stats.map((t) => t.toTransfer()) } : readBack ? { kind: 'readBack', readBack: readBack.whole.toTransfer() } : null }),
  };
}

/**
 * The handlers of the work after stage 1 (protocol.ts's GatherMessage), for shuffle-worker.ts's
 * table and for lanes on the calling thread. `lane()`: the stage 2 lane, made when first needed
 * (it reads the plan, which does not exist while groups are counted).
 */
export function gatherHandlers(lane: () => GatherLane): HandlerTable<GatherMessage> {
  return {
    census: (m) => {
      const g = censusBucket(m);
      return { result: g, transfer: [g.hi, g.lo, g.records, g.first, g.extra].map((a) => a.buffer as ArrayBuffer) };
    },
    split: (m) => {
      const r = splitPieces(m);
      return { result: r, transfer: [r.chunks.buffer as ArrayBuffer, ...(r.counts ? [r.counts.buffer as ArrayBuffer] : [])] };
    },
    bucket: (m) => lane().handle(m),
    partStats: (m) => lane().partStats(m),
  };
}

/** Stage 2 on the calling thread: one lane with the worker lanes' interface (see InlineLanes). */
export function inlineGatherLanes(lane: GatherLane): Lanes<GatherMessage, ShuffleFinal> {
  return new InlineLanes<GatherMessage, ShuffleFinal>(byKind(gatherHandlers(() => lane)), () => ({ final: { kind: 'gathered', final: lane.finish().final } }));
}
