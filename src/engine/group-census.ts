/**
 * The groups of `--group` gathered between the stages: the lanes count each bucket's groups from
 * its spill (census-bucket.ts) and hand back one list a bucket; the table is those lists
 * joined in bucket order, which is key order (see src/core/group-table.ts). Then the groups are
 * placed, whole, into cells, and the key → cell table is written for stage 2 (groups.bin).
 */
import { closeSync, openSync, readSync, rmSync } from 'node:fs';
import { writeAllSync } from '../io/write-all.js';
import { join } from 'node:path';
import pLimit from 'p-limit';
import { placeGroups } from '../core/balance.js';
import type { DealSpec } from '../core/deal.js';
import { GroupTable, type GroupTableData } from '../core/group-table.js';
import { RowdeckError } from '../errors.js';
import { censusBucket } from './census-bucket.js';
import type { SpillPiece } from './spill.js';
import { splitPieces, splitPolicy, unitsOf, type SplitSettings } from './split.js';
import type { CensusLanes, CensusMessage } from '../workers/protocol.js';

/** Where the groups are counted from: census buckets (keyed by group hash), and the strata map. */
export interface CensusSource {
  /** Census buckets, and each one's pieces: the census spill's, or the spill's where it is keyed by group. */
  count: number;
  piecesOf: (bucket: number) => SpillPiece[];
  /** Key bits that select a census bucket. */
  bits: number;
  /** Per scatter task: its stratum ids → dealing stratum ids. */
  taskToDealing: number[][];
  /**
   * A census bucket larger than `cap` is split (split.ts) into files in `dir` (nameless, gone at
   * the end) and counted as its sub-buckets, in key order (a group's records share its key, so
   * they stay together).
   */
  split?: SplitSettings;
}

/**
 * Counts every group, a census bucket (or sub-bucket) at a time on the lanes (or here, yielding
 * between buckets so signals and progress get through), into one table in key order.
 */
export async function countGroups(
  src: CensusSource,
  workFile: string,
  lanes: CensusLanes | null,
  width: number,
  progress: (done: number, total: number) => void,
): Promise<GroupTable> {
  const census = new GroupTableBuilder(workFile);
  const yieldNow = (): Promise<void> => new Promise<void>((resolve) => setImmediate(resolve));
  const { policy, slots } = splitPolicy(src.split, {
    shares: lanes ? width : 1,
    strata: src.taskToDealing,
    strataCount: 0,
    run: async (t) => (lanes ? lanes.run(t) : (await yieldNow(), splitPieces(t))),
  });
  const jobs: Promise<void>[] = [];
  try {
    let counted = 0;
    let seq = 0;
    const limit = pLimit(width);
    for (let b = 0; b < src.count; b++) {
      const units = await unitsOf(b, src.piecesOf(b), src.bits, policy);
      const counting = units.map((u) => {
        const k = seq++;
        return limit(async () => {
          const task: CensusMessage = { kind: 'census', census: k, pieces: u.pieces, strata: src.taskToDealing, bits: u.shared };
          if (lanes) census.add(k, await lanes.run(task));
          else {
            census.add(k, censusBucket(task));
            await yieldNow();
          }
        });
      });
      const releases = units.flatMap((u) => u.cleanup);
      const job = Promise.all(counting).then(() => {
        for (const release of releases) release();
        progress(++counted, src.count);
      });
      job.catch(() => {});
      jobs.push(job);
    }
    await Promise.all(jobs);
    return census.build();
  } finally {
    await Promise.allSettled(jobs);
    slots?.close();
    census.close();
  }
}

/** Groups placed into cells: each group's cell, and every (cell, stratum)'s count, `[cell * strata + s]`. */
export function placeAllGroups(groups: GroupTable, deal: DealSpec, strataSizes: number[]): { placed: Uint32Array; cellCounts: Float64Array } {
  const K = deal.folds;
  const wsum = deal.splits.reduce((a, s) => a + s.weight, 0);
  const cellWeight: number[] = [];
  for (const s of deal.splits) for (let c = 0; c < deal.partitions * K; c++) cellWeight.push(s.weight / wsum / (deal.partitions * K));
  const placed = placeGroups(groups, strataSizes, cellWeight);
  const nStrata = strataSizes.length;
  const cellCounts = new Float64Array(cellWeight.length * nStrata);
  const { records, first } = groups;
  for (let g = 0; g < groups.count; g++) {
    if (groups.extra.has(g)) for (const [s, m] of groups.strataOf(g)) cellCounts[placed[g]! * nStrata + s]! += m;
    else cellCounts[placed[g]! * nStrata + first[g]!]! += records[g]!;
  }
  return { placed, cellCounts };
}

/**
 * Writes the key → cell table (groups.bin, in `dir`) for stage 2. `bucketBits`: where the spill is
 * keyed by group, each bucket's groups are a run of the table, and their starts are returned;
 * null (records placed individually): every lane reads the whole table.
 */
/** A spill the groups are counted from (the census spill, or the spill where it is keyed by group). */
export interface CensusSpill {
  buckets: number;
  pieces: (bucket: number) => SpillPiece[];
}

/**
 * Group mode's plan step, the same for a run on one machine and a plan's deal step: every group
 * counted from `source` (census.bin in `dir`), placed largest first, and the lookup stage 2 reads
 * (groups.bin); `lookupBits` null where a bucket's records may belong to any group.
 */
export async function countAndPlaceGroups(a: {
  source: CensusSpill;
  taskToDealing: number[][];
  split: NonNullable<CensusSource['split']>;
  dir: string;
  lanes: CensusLanes | null;
  width: number;
  progress: (done: number, total: number) => void;
  deal: DealSpec;
  strataSizes: number[];
  lookupBits: number | null;
}): Promise<{ count: number; cellCounts: Float64Array; groupLookup: { groupsFile: string; groupStarts: number[] | null } }> {
  const src: CensusSource = { count: a.source.buckets, piecesOf: (b) => a.source.pieces(b), bits: Math.log2(a.source.buckets), taskToDealing: a.taskToDealing, split: a.split };
  const groups = await countGroups(src, join(a.dir, 'groups-census.bin'), a.lanes, a.width, a.progress);
  const placement = placeAllGroups(groups, a.deal, a.strataSizes);
  return { count: groups.count, cellCounts: placement.cellCounts, groupLookup: writeGroupLookup(a.dir, groups, placement.placed, a.lookupBits) };
}

export function writeGroupLookup(dir: string, groups: GroupTable, placed: Uint32Array, bucketBits: number | null): { groupsFile: string; groupStarts: number[] | null } {
  const groupsFile = 'groups.bin';
  writeGroupsFile(join(dir, groupsFile), groups.hi, groups.lo, placed);
  if (bucketBits === null) return { groupsFile, groupStarts: null };
  const buckets = 2 ** bucketBits;
  const starts = new Array<number>(buckets + 1).fill(0);
  for (let k = 0; k < groups.count; k++) starts[(bucketBits === 0 ? 0 : groups.hi[k]! >>> (32 - bucketBits)) + 1]!++;
  for (let b = 0; b < buckets; b++) starts[b + 1]! += starts[b]!;
  return { groupsFile, groupStarts: starts };
}

/**
 * Joins the buckets' lists in bucket order (GroupTable.assemble) without holding them all:
 * the lists come back in any order, and each is written to a file as soon as it and every one
 * before it are in, keeping only its classes other than the first (few, as a rule). build() then
 * reads the file into one table. Holding every list and then the joined table took ~40 bytes a
 * group at once (10.8 M groups: ~430 MB); this holds the table and a few lists.
 */
export class GroupTableBuilder {
  readonly #path: string;
  #fd: number;
  readonly #waiting = new Map<number, GroupTableData>();
  readonly #counts: number[] = [];
  readonly #extras: Float64Array[] = [];
  #at = 0;

  constructor(path: string) {
    this.#path = path;
    this.#fd = openSync(path, 'w+');
  }

  /** List `index` (0, 1, 2, …, each once, in any order). */
  add(index: number, d: GroupTableData): void {
    this.#waiting.set(index, d);
    for (let next = this.#waiting.get(this.#counts.length); next; next = this.#waiting.get(this.#counts.length)) {
      this.#waiting.delete(this.#counts.length);
      this.#at = writeArraysAt(this.#fd, [next.hi, next.lo, next.records, next.first].map((a) => a.subarray(0, next.count)), this.#at);
      this.#counts.push(next.count);
      this.#extras.push(next.extra);
    }
  }

  /** The table of every list added; the file is removed. */
  build(): GroupTable {
    let at = 0;
    try {
      if (this.#waiting.size > 0) throw new RowdeckError('RDK_INTERNAL', `group census: the list of bucket ${this.#counts.length} never came back.`);
      return GroupTable.assemble(this.#counts, this.#extras, (bytes) => {
        for (let got = 0; got < bytes.length; ) {
          const n = readSync(this.#fd, bytes, got, bytes.length - got, at + got);
          if (n === 0) throw new RowdeckError('RDK_INTERNAL', `group census: ${this.#path} ended early.`);
          got += n;
        }
        at += bytes.length;
      });
    } finally {
      this.close();
    }
  }

  /** Closes and removes the file (also after a failure). */
  close(): void {
    if (this.#fd < 0) return;
    closeSync(this.#fd);
    this.#fd = -1;
    rmSync(this.#path, { force: true });
  }
}

/** The sorted key -> cell table for the lanes (groups.bin): the keys' hi and lo words, then the cells. */
export function writeGroupsFile(path: string, hi: Uint32Array, lo: Uint32Array, cells: Uint32Array): void {
  const fd = openSync(path, 'w');
  try {
    writeArraysAt(fd, [hi, lo, cells], 0);
  } finally {
    closeSync(fd);
  }
}

/** Writes typed arrays one after the other from byte `at` of a file; returns where they end. */
function writeArraysAt(fd: number, arrays: (Uint32Array | Int32Array | Float64Array)[], at: number): number {
  for (const a of arrays) {
    const view = new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
    writeAllSync(fd, view, at);
    at += view.length;
  }
  return at;
}
