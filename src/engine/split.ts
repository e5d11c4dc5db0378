/**
 * The multi-pass layout's second pass (sizing.ts): a bucket too large for stage 2 to take whole
 * is scattered once more, by the next bits of its records' keys, into sub-buckets written to a
 * folder of its own; stage 2 then deals the sub-buckets in key order, as it deals buckets, and
 * removes the folder. Concatenated in order, the sub-buckets' records in key order are the
 * bucket's records in key order, so the output is the same as if the bucket had been dealt whole.
 *
 * The sub-buckets go to files that are used over and over (SplitSlots): a few per lane, opened
 * once, their names removed at once (so nothing is left after a crash), each written from its
 * start again by the next split that takes its slot once the one before is dealt. Creating,
 * filling and removing a folder of files for every split cost a system call's worth of
 * bookkeeping per file and a fresh page per 4 KiB written (docs/benchmarks.md, "Where system time
 * goes at 4 GB"); reused files keep their pages.
 *
 * Each lane scatters a share of the bucket's pieces (its own file), rewriting every record's
 * stratum word to its dealing stratum so that pieces of different scatter tasks can share a
 * sub-bucket (their pieces are read as task -1, see SpillPiece), and counts every sub-bucket's
 * records by stratum, which gives each sub-bucket its ranks. A sub-bucket still too large
 * (only where many records share a key: one huge group) is split again while key bits remain.
 */
import { closeSync, mkdirSync, openSync, readSync, rmSync, unlinkSync } from 'node:fs';
import { join } from 'node:path';
import { randomBytes } from 'node:crypto';
import { ioError, systemError } from '../errors.js';
import { BucketWriter, HEADER_BYTES, spillRanges, storeAllowance, type SpillPiece, type SpillStore } from './spill.js';
import { SpillIndex } from './spill-index.js';
import { BUFFER_CAP } from './sizing.js';
import type { SplitMessage } from '../workers/protocol.js';

/** One lane's share of a split. */
export interface SplitTask {
  /** Where this share writes: its file of the slot (`store.files[share]`), or, should that fail (a full disk), files named for `share` in `splitDir`. */
  splitDir: string;
  share: number;
  store: SpillStore;
  pieces: SpillPiece[];
  /** Per scatter task: its stratum ids -> dealing strata (pieces of task -1 hold dealing strata). */
  strata: number[][];
  /** Key bits every record shares; the sub-bucket is the next `bits`. */
  shared: number;
  bits: number;
  /** Buffer per sub-bucket. */
  bufferBytes: number;
  /** Count records per (sub-bucket, dealing stratum) over this many strata; 0: no counts. */
  strataCount: number;
}

export interface SplitResult {
  paths: string[];
  chunks: Float64Array;
  slabs: SharedArrayBuffer[];
  ramFiles: number[];
  /** `counts[sub * strataCount + stratum]`, or null. */
  counts: Uint32Array | null;
}

/** Bytes read and staged at once: pieces that follow on in one file are read together up to this. */
const READ_BYTES = 1 << 20;

let writer: BucketWriter | null = null;
let writerShape = '';
let readBuf: Buffer | null = null;

/** The next `bits` key bits after the first `shared` (shared + bits ≤ 32: the high word). */
function subOf(hi: number, shared: number, bits: number): number {
  return ((hi << shared) >>> 0) >>> (32 - bits);
}

/** Scatters one share of a bucket's pieces into sub-buckets (see the module's comment). */
export function splitPieces(t: SplitTask): SplitResult {
  const subs = 2 ** t.bits;
  const shape = `${subs}:${t.bufferBytes}`;
  // One writer per thread, started over for each split (a new one each time would leave its
  // memory to the collector).
  if (writer && writerShape === shape) writer.restart(t.splitDir, t.share, t.store);
  else {
    writer = new BucketWriter(t.splitDir, t.share, subs, t.bufferBytes, null, READ_BYTES, t.store);
    writerShape = shape;
  }
  const w = writer;
  const S = t.strataCount;
  const counts = S > 0 ? new Uint32Array(subs * S) : null;
  const maps = t.strata.map((m) => Int32Array.from(m));
  const scatterBytes = (data: Buffer, from: number, to: number, task: number): void => {
    w.stage(data, from, to);
    const u32 = new Uint32Array(data.buffer, data.byteOffset + from, (to - from) >>> 2);
    const map = task < 0 ? null : maps[task]!;
    for (let x = 0; x < u32.length; ) {
      const hi = u32[x]!;
      const lt = u32[x + 5]!;
      const len = lt >>> 2;
      const w3 = u32[x + 3]!;
      const stratum = map ? map[u32[x + 4]!]! : u32[x + 4]!;
      const sub = subOf(hi, t.shared, t.bits);
      const start = from + 4 * x + HEADER_BYTES;
      w.append(sub, hi, u32[x + 1]!, u32[x + 2]! + (w3 >>> 16) * 0x100000000, w3 & 0xffff, stratum, data, start, start + len, lt & 3);
      if (counts) counts[sub * S + stratum]!++;
      x += 6 + ((len + 3) >>> 2);
    }
  };
  let fd = -1;
  let open = '';
  try {
    for (let k = 0; k < t.pieces.length; k++) {
      const p = t.pieces[k]!;
      if (p.memory) {
        scatterBytes(Buffer.from(p.memory, p.offset, p.length), 0, p.length, p.task);
        continue;
      }
      // Pieces that follow on in one file (and task), read together.
      let length = p.length;
      while (k + 1 < t.pieces.length && length < READ_BYTES) {
        const q = t.pieces[k + 1]!;
        if (q.memory || q.path !== p.path || q.fd !== p.fd || q.task !== p.task || q.offset !== p.offset + length || length + q.length > READ_BYTES) break;
        length += q.length;
        k++;
      }
      if (!readBuf || readBuf.length < length) readBuf = Buffer.allocUnsafeSlow(Math.max(READ_BYTES, length));
      if (p.fd === undefined && p.path !== open) {
        if (fd >= 0) closeSync(fd);
        fd = -1;
        open = p.path;
        fd = openSync(p.path, 'r');
      }
      const from = p.fd ?? fd;
      for (let got = 0; got < length; ) {
        const r = readSync(from, readBuf, got, length - got, p.offset + got);
        if (r === 0) throw new Error(`spill file ends early at ${p.offset + got}`);
        got += r;
      }
      scatterBytes(readBuf, 0, length, p.task);
    }
    w.close();
  } catch (err) {
    w.abandon();
    throw open ? ioError(err, open, 'reading a spill file') : err;
  } finally {
    if (fd >= 0) closeSync(fd);
  }
  return { paths: [...w.paths], chunks: w.chunks.slice(), slabs: [], ramFiles: w.ramFiles, counts };
}

/** What a bucket is dealt as: itself, or the sub-buckets of its split. */
export interface GatherUnit {
  /** The plan's bucket the records belong to. */
  bucket: number;
  pieces: SpillPiece[];
  /** Key bits every record shares. */
  shared: number;
  /** A sub-bucket's records by dealing stratum (null: the bucket's own counts apply). */
  counts: Uint32Array | null;
  /** On the last unit of a split: what frees its slot (and those of splits inside it), to call once the unit is dealt. */
  cleanup: (() => void)[];
}

/** How stage 2 splits the buckets it cannot take whole. */
export interface SplitPolicy {
  /** Buckets larger than this are split. */
  cap: number;
  /** The sub-buckets' aimed size. */
  target: number;
  /** The files the splits write to. */
  slots: SplitSlots;
  /** Buffers of one split, over its shares. */
  bufferBytes: number;
  /** Shares a split is cut into (the lanes). */
  shares: number;
  strata: number[][];
  strataCount: number;
  run: (task: SplitMessage) => Promise<SplitResult>;
  /** Told of each split as it starts. */
  onSplit?: () => void;
}

/** What a caller says about splitting: the sizes, the buffers, where the files go, and who is told of each split. */
export type SplitSettings = Pick<SplitPolicy, 'cap' | 'target' | 'bufferBytes' | 'onSplit'> & { dir: string };

/**
 * The policy stage 2 and the group count split buckets by: the caller's settings (none: nothing
 * is split) and how the shares run; `slots` is closed by the caller once every unit is dealt.
 */
export function splitPolicy(settings: SplitSettings | undefined, how: Pick<SplitPolicy, 'shares' | 'strata' | 'strataCount' | 'run'>): { policy: SplitPolicy | null; slots: SplitSlots | null } {
  if (!settings) return { policy: null, slots: null };
  const slots = new SplitSlots(settings.dir);
  const { dir: _dir, ...sizes } = settings;
  return { policy: { ...sizes, ...how, slots }, slots };
}

/**
 * The files splits write their sub-buckets to: a slot is one file per share, taken by a split
 * and given back once its last sub-bucket is dealt; a free slot is taken again (its files written
 * from the start), else a new one is opened. The files have no names (removed as soon as opened),
 * in a folder of the spill's, so the disk they take goes back when they are closed or the
 * process ends. Slots in use stay few: the split being dealt, the next bucket's, and a split
 * inside one of them.
 */
export class SplitSlots {
  readonly #dir: string;
  readonly #free: number[] = [];
  readonly #fds: number[][] = [];
  readonly #allowance = storeAllowance(Number.MAX_SAFE_INTEGER);
  #closed = false;

  /** `dir`: where the files are made (and, should one fill its disk, where a share writes named files instead). */
  constructor(dir: string) {
    this.#dir = join(dir, `splits-${process.pid}-${randomBytes(3).toString('hex')}`);
  }

  /** A slot: its number, and for each of `shares` shares the store that writes to its file. */
  take(shares: number, subs: number): { slot: number; dir: string; stores: SpillStore[] } {
    if (this.#closed) throw new Error('internal: SplitSlots used after close');
    if (this.#fds.length === 0) {
      try {
        mkdirSync(this.#dir, { recursive: true });
      } catch (err) {
        throw systemError(err, this.#dir, 'creating a folder for the split buckets');
      }
    }
    const slot = this.#free.pop() ?? this.#fds.push([]) - 1;
    const fds = this.#fds[slot]!;
    for (let k = fds.length; k < shares; k++) {
      const path = join(this.#dir, `slot-${slot}-${k}`);
      try {
        fds.push(openSync(path, 'w+', 0o600));
        unlinkSync(path);
      } catch (err) {
        throw systemError(err, path, 'creating a file for the split buckets');
      }
    }
    const dir = join(this.#dir, `named-${slot}`);
    // Every range of the sub-buckets in the share's one file (its ends are kept apart by the writer).
    const ranges = spillRanges(subs).ranges;
    const stores = Array.from({ length: shares }, (_, k) => {
      const files: number[][] = [];
      files[k] = new Array<number>(ranges).fill(fds[k]!);
      return { allowance: this.#allowance, files, slabBytes: 0 };
    });
    return { slot, dir, stores };
  }

  /** Gives a slot back: its files may be written again. */
  give(slot: number): void {
    if (!this.#closed) this.#free.push(slot);
  }

  /** Closes every file and removes the folder (after the lanes are done with them). */
  close(): void {
    if (this.#closed) return;
    this.#closed = true;
    for (const row of this.#fds) for (const fd of row) {
      try {
        closeSync(fd);
      } catch {
        // already closed with the process's other files
      }
    }
    this.#fds.length = 0;
    rmSync(this.#dir, { recursive: true, force: true });
  }
}

/** How many sub-bucket bits split a bucket of `bytes` into sub-buckets of about `target` (0: it cannot be split further). */
export function splitBits(bytes: number, target: number, shared: number): number {
  const room = 32 - shared;
  if (room < 1) return 0;
  return Math.min(room, Math.max(1, Math.ceil(Math.log2(bytes / target))));
}

/**
 * The units bucket `bucket` is dealt as: itself when it fits `policy.cap` (or cannot be split),
 * else its sub-buckets in key order, split again where still too large.
 */
export async function unitsOf(bucket: number, pieces: SpillPiece[], shared: number, policy: SplitPolicy | null, counts: Uint32Array | null = null): Promise<GatherUnit[]> {
  const bytes = pieces.reduce((a, p) => a + p.length, 0);
  const bits = policy && bytes > policy.cap ? splitBits(bytes, policy.target, shared) : 0;
  if (bits === 0) return [{ bucket, pieces, shared, counts, cleanup: [] }];
  policy!.onSplit?.();
  const shares = shareOut(pieces, Math.max(1, Math.min(policy!.shares, pieces.length)));
  const subs = 2 ** bits;
  const slot = policy!.slots.take(shares.length, subs);
  const bufferBytes = Math.max(4096, Math.min(BUFFER_CAP, Math.floor(policy!.bufferBytes / shares.length / subs)));
  let results: SplitResult[];
  try {
    results = await Promise.all(
      shares.map((share, k) =>
        policy!.run({ kind: 'split', splitDir: slot.dir, share: k, store: slot.stores[k]!, pieces: share, strata: policy!.strata, shared, bits, bufferBytes, strataCount: policy!.strataCount }),
      ),
    );
  } catch (err) {
    policy!.slots.give(slot.slot);
    throw err;
  }
  const index = new SpillIndex(results, subs, () => -1);
  const S = policy!.strataCount;
  const units: GatherUnit[] = [];
  for (let j = 0; j < subs; j++) {
    let c: Uint32Array | null = null;
    if (S > 0) {
      c = new Uint32Array(S);
      for (const r of results) for (let s = 0; s < S; s++) c[s]! += r.counts![j * S + s]!;
    }
    const sub = index.pieces(j);
    // Split again only where this split made progress (records of one key cannot be parted).
    const again = index.bytes[j]! > policy!.cap && index.bytes[j]! < bytes ? policy : null;
    units.push(...(await unitsOf(bucket, sub, shared + bits, again, c)));
  }
  units[units.length - 1]!.cleanup.push(() => policy!.slots.give(slot.slot));
  return units;
}

/** Cuts a list of pieces into `n` runs of about equal bytes, in order. */
function shareOut(pieces: SpillPiece[], n: number): SpillPiece[][] {
  const total = pieces.reduce((a, p) => a + p.length, 0);
  const out: SpillPiece[][] = [[]];
  let sum = 0;
  for (const p of pieces) {
    if (out.length < n && sum >= (total * out.length) / n && out[out.length - 1]!.length > 0) out.push([]);
    out[out.length - 1]!.push(p);
    sum += p.length;
  }
  return out;
}
