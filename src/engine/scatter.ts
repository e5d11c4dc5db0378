/**
 * Stage 1, scatter: give every record its key and append it to the spill bucket of its key
 * range; count records per (bucket, stratum) for the plan and collect what group mode needs.
 *
 *   plain file:  main thread reads blocks ──▶ scatter worker parses its block (io/blocks.ts),
 *                checked in order ──▶ commit ──▶ ScatterTask: key, stratum, BucketWriter
 *   stdin, gzip: main thread: RecordReader ──▶ packBatch ──▶ scatter worker k (≤ 2 in flight each)
 *                                                             ScatterTask, as above
 *                ◀── buffers back for reuse
 *   finish ──▶ each worker closes its spill files, returns counts/strata/fingerprint
 *
 * The per-record work runs on the workers, and for plain files the parsing too. Each
 * worker is one scatter task with its own spill files and its own local stratum ids; the plan maps
 * them to one dealing order. Which worker saw which record changes nothing downstream: stage 2
 * sorts every bucket by key and identity.
 */
import { join } from 'node:path';
import { FieldKind, type BadRecordPolicy, type InputFormat, type InputSchema, type RecordBatch, type RejectedRecord } from '../io/batch.js';
import { Fingerprint, hashBytes, hashWords3, type Secret } from '../core/hash.js';
import { hashedCell, type DealSpec } from '../core/deal.js';
import type { RecordReaderOptions } from '../io/reader.js';
import { inputReaderOptions, isPlainFile, readInput, ReadAhead } from '../io/input.js';
import { readInputs, readSmallInput, smallFileSize, SmallInputSender } from '../io/small-inputs.js';
import { readSlice, type InputSlice, type SliceRead } from '../io/slices.js';
import { blockSizes, readInBlocks } from '../io/blocks.js';
import { RowdeckError } from '../errors.js';
import { WorkerLanes } from '../workers/lanes.js';
import { scatterFinals, type BatchMessage, type Reply, type ScatterMessage, type ShuffleFinal, type SmallInputMessage, type SmallInputReply } from '../workers/protocol.js';
import { BucketWriter, QUEUE, spillRanges, type SpillPiece, type SpillStore } from './spill.js';
import { SpillIndex } from './spill-index.js';
import { BYTE_KEY_LIMIT, ByteIdTable } from '../core/byte-table.js';
import { fieldKey, keyBytes, MAX_STRATA, stratumKey, tooManyStrata, tupleKey, type KeyColumn, type KeyRange } from '../core/strata.js';

/** What one scatter task needs to know: plain data, so it can be posted to a worker. */
export interface ScatterTaskConfig {
  inputs: string[];
  stratify: string[];
  /** Per stratify column: quantile bin edges, or null for plain values. */
  bins: (number[] | null)[];
  key: string[];
  group: string | null;
  secret: number[];
  spillDir: string;
  task: number;
  bits: number;
  bufferBytes: number;
  /** `--assign hash`: count records per (cell, stratum) as they pass, so the plan needs no re-read. */
  hashCells: { deal: DealSpec; cellSecret: number[] } | null;
  /**
   * Group and hash modes with records placed individually inside their part (`--order random`
   * or `spread`): a record's spill key is the hash of its identity, like exact mode's, and the
   * hash of its group or key values (which decides its cell) takes the identity's place in the
   * spill header (see spill.ts). With `censusBits` (group mode), every record is also appended,
   * without its bytes, to a census spill bucketed by the group's hash, where the groups are
   * counted before they are placed. Null: the spill key is the group or key hash itself, and a
   * group's records are next to each other in key order (`--order grouped`).
   */
  cellKeyInHeader: { censusBits: number | null; censusBufferBytes: number } | null;
  /** The memory layout: chunks kept in memory while the allowance lasts (see spill.ts); null: files. */
  store: SpillStore | null;
  /** The same for the census spill (files of its own: its ranges are not the spill's). */
  censusStore: SpillStore | null;
}

export interface ScatterOptions extends Omit<ScatterTaskConfig, 'task' | 'secret' | 'bins' | 'hashCells' | 'cellKeyInHeader' | 'store' | 'censusStore'> {
  hashCells?: ScatterTaskConfig['hashCells'];
  cellKeyInHeader?: ScatterTaskConfig['cellKeyInHeader'];
  store?: SpillStore | null;
  censusStore?: SpillStore | null;
  /** Called with each range of the spill (and of the census spill) that stage 2 has passed: its files in memory can be closed. */
  onRelease?: { spill: (range: number) => void; census: (range: number) => void };
  format: InputFormat;
  delimiter: string | undefined;
  header: boolean;
  onBadRecord: BadRecordPolicy;
  onReject: ((r: RejectedRecord) => void) | undefined;
  bins?: (number[] | null)[];
  secret: Secret;
  /** Scatter worker threads; 0 runs the tasks' work on the calling thread. */
  threads: number;
  /** Path of the compiled scatter worker module (needed when threads > 0 and `lanes` is not given). */
  workerFile?: string;
  /**
   * Lanes to run the tasks on, started by the caller with `scatterTaskConfig(o)` as their data
   * and kept by it (the shuffle hands the same threads stage 2's buckets afterwards).
   */
  lanes?: ScatterLanes;
  /** Called once with the first input's schema, before any record is scattered; may throw. */
  onSchema?: (schema: InputSchema) => void;
  /** JSON Lines: a key no record may have (the fold column the output adds; see RecordReaderOptions). */
  refuseKey?: string;
  onProgress?: (bytes: number, records: number) => void;
  /** Size of the blocks the workers parse (plain files); default DEFAULT_BLOCK_BYTES. */
  blockBytes?: number;
  /**
   * Read only these slices of the inputs (a cluster's scatter task), in order, instead of every
   * input whole; `inputs` stays the whole list, so records keep their input ordinals. Each read's
   * start, end and line count come back in `ScatterResult.slices`.
   */
  slices?: { slice: InputSlice; schema: InputSchema | null }[];
  /** With slices: the first input's columns, that every other input's header must match. */
  expectedColumns?: { columns: string[]; from: string };
  /** With slices: told before each slice is read (its index), so refused records can be told apart by slice. */
  onSliceStart?: (index: number) => void;
}

/** What one scatter task returns; plain data (posted from a worker). */
export interface ScatterTaskResult {
  task: number;
  /** Local stratum id -> canonical stratum key. */
  strata: string[];
  /** `bucketCounts[stratum][bucket]` (a bucket holds far fewer than 2^32 records: it fits the budget). */
  bucketCounts: Uint32Array[];
  bucketBytes: Float64Array;
  /** The task's spill files (one per range of buckets, see spillRanges; a file may not exist if
   * its range got no records), its slabs of memory (the memory layout), and every chunk it wrote
   * in either (CHUNK_FIELDS numbers each, see spill.ts). */
  paths: string[];
  chunks: Float64Array;
  slabs: SharedArrayBuffer[];
  /** Its files in memory, per range (SpillStore.files), or empty. */
  ramFiles: number[];
  records: number;
  fingerprint: { hi: number; lo: number; count: number };
  /** Hash mode: `cellCounts[stratum][cell]`. */
  cellCounts: Float64Array[] | null;
  /** The census spill's files, chunks and slabs (see ScatterTaskConfig.cellKeyInHeader), as those above are the spill's. */
  census: { paths: string[]; chunks: Float64Array; slabs: SharedArrayBuffer[]; ramFiles: number[] } | null;
}

export interface ScatterResult {
  schema: InputSchema;
  /** Union stratum id -> canonical stratum key. */
  strata: string[];
  /** `bucketCounts[stratum][bucket]` over all tasks. */
  bucketCounts: Uint32Array[];
  /** Per task: local stratum id -> union stratum id. */
  taskStrata: number[][];
  /** Where every bucket's records lie: chunks of every task's spill files or slabs. */
  spill: SpillIndex;
  inputs: { path: string; bytes: number; records: number; rejected: number }[];
  records: number;
  rejected: number;
  fingerprint: Fingerprint;
  /** Hash mode: `cellCounts[stratum][cell]` over all tasks (union stratum ids). */
  cellCounts: Float64Array[] | null;
  /** Where every census bucket's records lie (see ScatterTaskConfig.cellKeyInHeader); null without a census spill. */
  census: SpillIndex | null;
  /** With ScatterOptions.slices: how each slice was read, and every scatter task's own result (for another process to merge). */
  slices?: SliceRead[];
  results?: ScatterTaskResult[];
}

/** One scatter task: the per-record work of stage 1 for the batches it is given. */
export class ScatterTask {
  readonly #c: ScatterTaskConfig;
  readonly #secret: Secret;
  readonly #writer: BucketWriter;
  readonly #fp = new Fingerprint();
  readonly #strataIds = new Map<string, number>();
  readonly #strata: string[] = [];
  readonly #bucketCounts: Uint32Array[] = [];
  readonly #fast = new ByteIdTable();
  readonly #hasBins: boolean;
  /** The stratify columns as stratum keys read them, from the first wanted fields, in order. */
  readonly #keyColumns: KeyColumn[];
  readonly #keySlots: Int32Array;
  readonly #keyRange: KeyRange = { start: 0, end: 0 };
  readonly #keyBuf = Buffer.allocUnsafe(4096);
  readonly #cellSecret: Secret | null;
  readonly #cellCounts: Float64Array[] = [];
  readonly #census: BucketWriter | null;
  readonly #censusShift: number;
  #records = 0;
  #input = 0;

  constructor(c: ScatterTaskConfig) {
    this.#c = c;
    this.#secret = Uint32Array.from(c.secret);
    this.#writer = new BucketWriter(c.spillDir, c.task, 2 ** c.bits, c.bufferBytes, this.#fp, undefined, c.store);
    const census = c.cellKeyInHeader?.censusBits ?? null;
    this.#census = census === null ? null : new BucketWriter(censusDir(c.spillDir), c.task, 2 ** census, c.cellKeyInHeader!.censusBufferBytes, null, 0, c.censusStore);
    this.#censusShift = census === null || census === 0 ? 32 : 32 - census;
    this.#hasBins = c.bins.some((x) => x !== null && x !== undefined);
    this.#keyColumns = c.stratify.map((name, w) => ({ name, edges: c.bins[w] ?? null }));
    this.#keySlots = Int32Array.from(c.stratify, (_, w) => w);
    this.#cellSecret = c.hashCells ? Uint32Array.from(c.hashCells.cellSecret) : null;
    this.#writer.setKeySecret(this.#secret);
  }

  #newStratum(k: string): number {
    const id = this.#strata.length;
    if (id >= MAX_STRATA) throw tooManyStrata(this.#c.stratify);
    this.#strataIds.set(k, id);
    this.#strata.push(k);
    this.#bucketCounts.push(new Uint32Array(2 ** this.#c.bits));
    return id;
  }

  #stratumOf(b: RecordBatch, i: number): number {
    const nStrat = this.#c.stratify.length;
    if (nStrat === 0) return this.#strata.length ? 0 : this.#newStratum('');
    const r = this.#keyRange;
    // One column of classes: looked up by the field's bytes where they are its key (keyBytes).
    if (nStrat === 1 && !this.#hasBins && keyBytes(b, i, 0, r)) {
      let id = this.#fast.lookup(b.data, r.start, r.end);
      if (id < 0) {
        const k = b.data.toString('latin1', r.start, r.end);
        id = this.#strataIds.get(k) ?? this.#newStratum(k);
        this.#fast.insert(b.data, r.start, r.end, id);
      }
      return id;
    }
    const k = stratumKey(b, i, this.#keySlots, this.#keyColumns, this.#c.inputs[this.#input]!);
    return this.#strataIds.get(k) ?? this.#newStratum(k);
  }

  /**
   * Keys, strata and buckets of a batch's records, each appended to its bucket. (Copying them
   * bucket by bucket after a counting sort of the batch was tried: no faster on the benchmark.)
   */
  addBatch(batch: RecordBatch, input: number): void {
    this.#input = input;
    const c = this.#c;
    if (this.#writer.enqueues && c.key.length === 0 && c.group === null && !this.#cellSecret) {
      this.#addIdentityKeyed(batch, input);
      return;
    }
    const nStrat = c.stratify.length;
    const nKey = c.key.length;
    const groupSlot = c.group !== null ? nStrat + nKey : -1;
    const shift = 32 - c.bits;
    const inHeader = c.cellKeyInHeader !== null;
    const writer = this.#writer;
    const d = batch.data;
    const n = batch.count;
    if (n === 0) return;
    const room = writer.stagingBytes;
    let staged = 0; // records before this index are covered by the staged run
    for (let i = 0; i < n; i++) {
      if (i === staged) {
        // Stage the next run of records that fits the staging area (a long record goes alone).
        let j = i + 1;
        while (j < n && batch.next[j]! - batch.start[i]! <= room) j++;
        writer.stage(d, batch.start[i]!, batch.next[j - 1]!);
        staged = j;
      }
      const offset = batch.offset[i]!;
      let h: Uint32Array;
      const gk = groupSlot >= 0 ? i * batch.wanted + groupSlot : -1;
      if (gk >= 0 && batch.fieldKind[gk] === FieldKind.Plain && batch.fieldEnd[gk]! > batch.fieldStart[gk]!) {
        // A plain group value is its own key text (fieldKey's latin1 string of the same bytes):
        // hashed where it lies, with no string made for it.
        h = hashBytes(this.#secret, d, batch.fieldStart[gk]!, batch.fieldEnd[gk]!);
      } else if (groupSlot >= 0 || nKey > 0) {
        // Keys from column values: equal values, equal keys, wherever the record sits.
        const text = groupSlot >= 0 ? fieldKey(batch, i, groupSlot) : tupleKey(batch, i, nStrat, nKey);
        const kb = this.#keyBuf;
        const len = kb.write(text, 0, 'latin1');
        h = len < kb.length ? hashBytes(this.#secret, kb, 0, len) : hashBytes(this.#secret, Buffer.from(text, 'latin1'), 0, Buffer.byteLength(text, 'latin1'));
      } else {
        h = hashWords3(this.#secret, input, Math.floor(offset / 0x100000000), offset >>> 0);
      }
      const hi = h[0]!;
      const lo = h[1]!;
      const st = this.#stratumOf(batch, i);
      const e = batch.end[i]!;
      if (inHeader) {
        // The spill key is the identity's hash (as exact mode's); the group or key hash goes where
        // the identity would: high word as the word that holds input and offset's high bits.
        const census = this.#census;
        // `>>> 32` is `>>> 0` in JavaScript: one census bucket takes a shift of 32 apart.
        if (census) census.append(this.#censusShift === 32 ? 0 : hi >>> this.#censusShift, hi, lo, offset, input, st, d, e, e, 0);
        const r = hashWords3(this.#secret, input, Math.floor(offset / 0x100000000), offset >>> 0);
        const bucket = c.bits === 0 ? 0 : r[0]! >>> shift;
        writer.append(bucket, r[0]!, r[1]!, lo + (hi >>> 16) * 0x100000000, hi & 0xffff, st, d, batch.start[i]!, e, batch.next[i]! - e);
        this.#bucketCounts[st]![bucket]!++;
      } else {
        const bucket = c.bits === 0 ? 0 : hi >>> shift;
        writer.append(bucket, hi, lo, offset, input, st, d, batch.start[i]!, e, batch.next[i]! - e);
        this.#bucketCounts[st]![bucket]!++;
      }
      if (this.#cellSecret) {
        const deal = c.hashCells!.deal;
        const counts = (this.#cellCounts[st] ??= new Float64Array(deal.splits.length * deal.partitions * deal.folds));
        counts[hashedCell(deal, this.#cellSecret, hi, lo)]!++;
      }
    }
    this.#records += n;
  }

  /**
   * addBatch where a record's key is the hash of its identity (no --key or --group, exact
   * dealing): the module hashes, buckets and queues a staged run at a time (BucketWriter.enqueueRun);
   * JavaScript finds the strata. The same keys, buckets and counts as the loop in addBatch.
   */
  #addIdentityKeyed(batch: RecordBatch, input: number): void {
    const writer = this.#writer;
    const d = batch.data;
    const n = batch.count;
    const room = writer.stagingBytes;
    const strata = writer.runStrata;
    const bits = this.#c.bits;
    for (let i = 0; i < n; ) {
      let j = i + 1;
      while (j < n && j - i < QUEUE && batch.next[j]! - batch.start[i]! <= room) j++;
      if (batch.next[j - 1]! - batch.start[i]! > room) {
        // A record longer than the staging area goes alone, by the general path.
        this.#addOne(batch, i, input);
        i++;
        continue;
      }
      writer.stage(d, batch.start[i]!, batch.next[j - 1]!);
      for (let k = i; k < j; k++) strata[k - i] = this.#stratumOf(batch, k);
      writer.enqueueRun(batch, i, j, input, bits, this.#bucketCounts);
      i = j;
    }
    this.#records += n;
  }

  /** One record by append, keyed by its identity (a record too long to be staged). */
  #addOne(batch: RecordBatch, i: number, input: number): void {
    const offset = batch.offset[i]!;
    const h = hashWords3(this.#secret, input, Math.floor(offset / 0x100000000), offset >>> 0);
    const hi = h[0]!;
    const lo = h[1]!;
    const st = this.#stratumOf(batch, i);
    const bucket = this.#c.bits === 0 ? 0 : hi >>> (32 - this.#c.bits);
    const e = batch.end[i]!;
    this.#writer.stage(batch.data, batch.start[i]!, batch.next[i]!);
    this.#writer.append(bucket, hi, lo, offset, input, st, batch.data, batch.start[i]!, e, batch.next[i]! - e);
    this.#bucketCounts[st]![bucket]!++;
  }

  finish(): ScatterTaskResult {
    this.#writer.close();
    this.#census?.close();
    return {
      task: this.#c.task,
      strata: this.#strata,
      bucketCounts: this.#bucketCounts,
      bucketBytes: this.#writer.bytes,
      paths: this.#writer.paths,
      chunks: this.#writer.chunks,
      slabs: this.#writer.slabs,
      ramFiles: this.#writer.ramFiles,
      records: this.#records,
      fingerprint: this.#fp.toJSON(),
      cellCounts: this.#cellSecret ? this.#strata.map((_, st) => this.#cellCounts[st] ?? new Float64Array(0)) : null,
      census: this.#census ? { paths: this.#census.paths, chunks: this.#census.chunks, slabs: this.#census.slabs, ramFiles: this.#census.ramFiles } : null,
    };
  }

  abandon(): void {
    this.#writer.abandon();
    this.#census?.abandon();
  }
}

// --- batches across threads ------------------------------------------------------------------------

/**
 * Packs a batch (records re-based to 0) into one transferable buffer:
 * [header 8 × f64][data][start u32][end u32][next u32][fieldStart u32][fieldEnd u32][offset f64][line f64][fieldKind u8]
 */
export function packBatch(b: RecordBatch, input: number, reuse: ArrayBuffer | undefined): ArrayBuffer {
  const n = b.count;
  const W = b.wanted;
  // Records are kept at their offsets from the start of the reader's buffer (usually the first
  // record's offset is 0 or a header's length), so the position arrays copy with one memcpy
  // each; only a far-off start is cut and re-based.
  const base = n > 0 && b.start[0]! > 1 << 22 ? b.start[0]! : 0;
  const dataLen = n > 0 ? b.next[n - 1]! - base : 0;
  const dataPad = (dataLen + 7) & ~7;
  const size = 64 + dataPad + n * 4 * 3 + n * W * 4 * 2 + ((n * 8 * 2 + 7) & ~7) + ((n * W + 7) & ~7) + 16;
  const ab = reuse && reuse.byteLength >= size ? reuse : new ArrayBuffer(Math.ceil(size * 1.25));
  const head = new Float64Array(ab, 0, 8);
  head[0] = n;
  head[1] = W;
  head[2] = dataLen;
  head[3] = input;
  let at = 64;
  new Uint8Array(ab, at, dataLen).set(b.data.subarray(base, base + dataLen));
  at += dataPad;
  const rebase = (src: Uint32Array, len: number, shift: number): void => {
    const dst = new Uint32Array(ab, at, len);
    if (shift === 0) dst.set(src.subarray(0, len));
    else for (let i = 0; i < len; i++) dst[i] = src[i]! - shift;
    at += len * 4;
  };
  rebase(b.start, n, base);
  rebase(b.end, n, base);
  rebase(b.next, n, base);
  rebase(b.fieldStart, n * W, base);
  rebase(b.fieldEnd, n * W, base);
  at = (at + 7) & ~7;
  new Float64Array(ab, at, n).set(b.offset.subarray(0, n));
  at += n * 8;
  new Float64Array(ab, at, n).set(b.line.subarray(0, n));
  at += n * 8;
  new Uint8Array(ab, at, n * W).set(b.fieldKind.subarray(0, n * W));
  return ab;
}

/** Worker lanes that take packed batches (scatter and profile workers); a batch is answered with its buffer, released for reuse. */
export interface BatchLanes {
  readonly size: number;
  run<M extends BatchMessage>(m: M, transfer: ArrayBuffer[]): Promise<Reply<M, unknown>>;
  runOn<M extends BatchMessage>(lane: number, m: M, transfer: ArrayBuffer[]): Promise<Reply<M, unknown>>;
}

/**
 * Posts batches read on the main thread to worker lanes as packed buffers: at most two waiting
 * or running per worker (bounded memory, and the reader pauses), each buffer coming back for
 * reuse (allocating ~1 MiB per batch costs page faults). A batch goes to one lane, or with
 * `everyLane` to each of them (lanes that share out columns, see `columnShare` in profile.ts).
 */
export class BatchSender {
  readonly #lanes: BatchLanes;
  readonly #everyLane: boolean;
  readonly #spare: ArrayBuffer[] = [];
  readonly #running = new Set<Promise<void>>();

  constructor(lanes: BatchLanes, everyLane = false) {
    this.#lanes = lanes;
    this.#everyLane = everyLane;
  }

  /** Sends a batch; the batch may be reused once this resolves (it is copied). */
  async send(batch: RecordBatch, input: number): Promise<void> {
    if (batch.count === 0) return;
    if (!this.#everyLane) return this.#post(batch, input, -1);
    for (let lane = 0; lane < this.#lanes.size; lane++) await this.#post(batch, input, lane);
  }

  /** Packs and posts one copy of the batch, to `lane` or (-1) to any lane. */
  async #post(batch: RecordBatch, input: number, lane: number): Promise<void> {
    while (this.#running.size >= 2 * this.#lanes.size) await Promise.race(this.#running);
    const buffer = packBatch(batch, input, this.#spare.pop());
    const m: BatchMessage = { kind: 'batch', buffer };
    const p: Promise<void> = (lane < 0 ? this.#lanes.run(m, [buffer]) : this.#lanes.runOn(lane, m, [buffer]))
      .then((back) => void this.#spare.push(back.buffer))
      .finally(() => this.#running.delete(p));
    p.catch(() => {});
    this.#running.add(p);
  }

  /** Waits for every batch sent; rethrows a worker's error. */
  async drain(): Promise<void> {
    await Promise.all(this.#running);
  }
}

export function unpackBatch(ab: ArrayBuffer): { batch: RecordBatch; input: number } {
  const head = new Float64Array(ab, 0, 8);
  const n = head[0]!;
  const W = head[1]!;
  const dataLen = head[2]!;
  let at = 64;
  const data = Buffer.from(ab, at, dataLen);
  at += (dataLen + 7) & ~7;
  const u32 = (len: number): Uint32Array => {
    const a = new Uint32Array(ab, at, len);
    at += len * 4;
    return a;
  };
  const start = u32(n);
  const end = u32(n);
  const next = u32(n);
  const fieldStart = u32(n * W);
  const fieldEnd = u32(n * W);
  at = (at + 7) & ~7;
  const offset = new Float64Array(ab, at, n);
  at += n * 8;
  const line = new Float64Array(ab, at, n);
  at += n * 8;
  const fieldKind = new Uint8Array(ab, at, n * W);
  return { batch: { data, count: n, start, end, next, offset, line, wanted: W, fieldStart, fieldEnd, fieldKind }, input: head[3]! };
}

// --- orchestration -----------------------------------------------------------------------------------

/** The worker's side of a SmallInputMessage for a scatter task (see src/io/small-inputs.ts). */
export function addSmallInput(task: ScatterTask, m: SmallInputMessage): SmallInputReply {
  return readSmallInput(m, (batch) => task.addBatch(batch, m.input));
}

export type { ScatterMessage } from '../workers/protocol.js';

/**
 * Lanes that run scatter tasks (shuffle-worker.ts): one worker each, or the caller's (see
 * `ScatterOptions.lanes`), which take stage 2's work afterwards.
 */
export type ScatterLanes = Pick<WorkerLanes<ScatterMessage, never, ShuffleFinal>, 'size' | 'run' | 'runOn' | 'finish' | 'destroy'>;

/** What every scatter task is told (its lane number aside): the worker data of the scatter lanes. */
export function scatterTaskConfig(o: ScatterOptions): Omit<ScatterTaskConfig, 'task'> {
  const tasks = Math.max(1, o.threads);
  return {
    inputs: o.inputs,
    stratify: o.stratify,
    bins: o.bins ?? o.stratify.map(() => null),
    key: o.key,
    group: o.group,
    secret: Array.from(o.secret),
    spillDir: o.spillDir,
    bits: o.bits,
    bufferBytes: Math.max(4096, Math.floor(o.bufferBytes / tasks)),
    hashCells: o.hashCells ?? null,
    cellKeyInHeader: o.cellKeyInHeader ? { ...o.cellKeyInHeader, censusBufferBytes: Math.max(4096, Math.floor(o.cellKeyInHeader.censusBufferBytes / tasks)) } : null,
    store: o.store ?? null,
    censusStore: o.censusStore ?? null,
  };
}

/**
 * Worker data for lanes that will not scatter (a plan's deal, gather and finish steps start the
 * same worker entry): no inputs, one bucket of a small buffer, `spillDir` where plan.json is.
 */
export function idleScatterConfig(spillDir: string): Omit<ScatterTaskConfig, 'task'> {
  return { inputs: [], stratify: [], bins: [], key: [], group: null, secret: [0, 0, 0, 0], spillDir, bits: 0, bufferBytes: 4096, hashCells: null, cellKeyInHeader: null, store: null, censusStore: null };
}

/** The census spill's folder, inside the spill folder. */
export function censusDir(spillDir: string): string {
  return join(spillDir, 'census');
}

export async function scatter(o: ScatterOptions): Promise<ScatterResult> {
  const wanted = [...o.stratify, ...o.key, ...(o.group !== null ? [o.group] : [])];
  const tasks = Math.max(1, o.threads);
  const config = scatterTaskConfig(o);
  const inputs = o.inputs.map((path) => ({ path, bytes: 0, records: 0, rejected: 0 }));
  let schema: InputSchema | null = null;
  const takeSchema = (sch: InputSchema): void => {
    if (schema) return;
    schema = sch;
    o.onSchema?.(sch);
  };

  const inline = o.threads === 0 ? new ScatterTask({ ...config, task: 0 }) : null;
  if (!inline && !o.workerFile && !o.lanes) throw new RowdeckError('RDK_INTERNAL', 'scatter: no worker module given');
  const ownLanes = !inline && !o.lanes;
  const lanes: ScatterLanes | null = inline ? null : (o.lanes ?? new WorkerLanes<ScatterMessage, never, ShuffleFinal>(o.workerFile!, tasks, config));
  const sender = lanes ? new BatchSender(lanes) : null;
  const small = lanes && o.onBadRecord === 'fail' && o.inputs.length > 1 ? new SmallInputSender(lanes) : null;
  const send = async (batch: RecordBatch, input: number, sch: InputSchema): Promise<void> => {
    takeSchema(sch);
    if (inline) inline.addBatch(batch, input);
    else await sender!.send(batch, input);
  };
  // Progress counts the bytes taken from each source (compressed ones for gzip), which is what
  // the file sizes it is measured against hold; the manifest counts them decompressed.
  const taken = o.inputs.map(() => 0);
  const progress = (): void => o.onProgress?.(taken.reduce((a, b) => a + b, 0), inputs.reduce((a, x) => a + x.records, 0));
  try {
    let expected: { columns: string[]; from: string } | undefined;
    // With small inputs given to the workers, nothing is read ahead here (see SmallInputSender).
    const ahead = new ReadAhead(o.inputs, blockSizes({ ...(o.blockBytes !== undefined ? { blockBytes: o.blockBytes } : {}) }).block, small ? 0 : undefined);
    const readerOptions = (k: number): RecordReaderOptions =>
      inputReaderOptions(o.inputs[k]!, { format: o.format, ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}), ...(o.refuseKey !== undefined ? { refuseKey: o.refuseKey } : {}), header: o.header, wanted, onBadRecord: o.onBadRecord, onReject: o.onReject }, expected);
    /** Reads input k here: whole if it was read ahead, else in blocks by the workers, else as a stream. */
    const readHere = async (k: number): Promise<void> => {
      const path = o.inputs[k]!;
      const ro = readerOptions(k);
      const seen = inputs[k]!;
      const whole = await ahead.take(k);
      const totals =
        !whole && lanes && (await isPlainFile(path))
          ? await readInBlocks({
              path,
              input: k,
              reader: ro,
              lanes,
              ...(o.blockBytes !== undefined ? { blockBytes: o.blockBytes } : {}),
              sequential: (batch, sch) => send(batch, k, sch),
              onSchema: takeSchema,
              onProgress: (bytes, records) => {
                seen.bytes = taken[k] = bytes;
                seen.records = records;
                progress();
              },
            })
          : null;
      if (totals) {
        seen.bytes = taken[k] = totals.bytes;
        seen.records = totals.records;
        seen.rejected = totals.rejected;
      } else {
        const source = { bytes: 0 };
        for await (const { batch, schema: sch, stats } of readInput(path, ro, whole, source)) {
          await send(batch, k, sch);
          taken[k] = source.bytes;
          seen.records += batch.count;
          seen.bytes = stats.bytes;
          seen.rejected = stats.rejected;
          progress();
        }
      }
      if (k === 0 && ro.format !== 'jsonl' && schema) expected = { columns: (schema as InputSchema).columns, from: ro.file };
    };
    if (o.slices) {
      expected = o.expectedColumns;
      const reads: SliceRead[] = [];
      for (const [j, { slice, schema: known }] of o.slices.entries()) {
        const k = slice.input;
        const read: SliceRead = { start: 0, end: 0, lines: 0, records: 0, bytes: 0, rejected: 0 };
        o.onSliceStart?.(j);
        try {
          if (slice.start === 0 && slice.end < 0) {
            // A whole input (gzip too): read as always; its line count matters to no slice after it.
            for await (const { batch, schema: sch, stats } of readInput(o.inputs[k]!, readerOptions(k))) {
              await send(batch, k, sch);
              read.records += batch.count;
              read.bytes = stats.bytes;
              read.rejected = stats.rejected;
            }
            read.end = read.bytes;
          } else {
            for await (const { batch, schema: sch } of readSlice(o.inputs[k]!, slice, readerOptions(k), known, read)) await send(batch, k, sch);
          }
        } catch (err) {
          // Which slice stopped: its line numbers count from its own start.
          if (err instanceof RowdeckError) err.details.slice = j;
          throw err;
        }
        const seen = inputs[k]!;
        seen.records += read.records;
        seen.bytes += read.bytes;
        seen.rejected += read.rejected;
        reads.push(read);
        progress();
      }
      if (!schema) throw new RowdeckError('RDK_INPUT_EMPTY', `${o.inputs.join(', ')}: no records in this task's slices.`, { file: o.inputs[o.slices[0]?.slice.input ?? 0] });
      let results: ScatterTaskResult[];
      if (inline) results = [inline.finish()];
      else {
        await sender!.drain();
        results = scatterFinals(await lanes!.finish());
      }
      const censusBits = o.cellKeyInHeader?.censusBits ?? null;
      // The merge adds into the first task's count arrays: the results handed back keep their own.
      const copies = results.map((r) => ({ ...r, bucketCounts: r.bucketCounts.map((a) => a.slice()) }));
      return { ...mergeScatterResults(copies, schema, inputs, 2 ** o.bits, censusBits === null ? 0 : 2 ** censusBits), slices: reads, results };
    }
    await readInputs(
      o.inputs.length,
      () => small,
      (k) => {
        const size = schema ? smallFileSize(o.inputs[k]!) : null;
        if (size === null) return null;
        const seen = inputs[k]!;
        return {
          path: o.inputs[k]!,
          size,
          reader: readerOptions(k),
          done: (records, bytes) => {
            seen.records = records;
            seen.bytes = taken[k] = bytes;
            progress();
          },
        };
      },
      readHere,
    );
    progress();
    if (!schema) throw new RowdeckError('RDK_INPUT_EMPTY', `${o.inputs.join(', ')}: no records to shuffle.`, { file: o.inputs[0] });
    let results: ScatterTaskResult[];
    if (inline) results = [inline.finish()];
    else {
      await sender!.drain();
      results = scatterFinals(await lanes!.finish());
    }
    const censusBits = o.cellKeyInHeader?.censusBits ?? null;
    return mergeScatterResults(results, schema, inputs, 2 ** o.bits, censusBits === null ? 0 : 2 ** censusBits, o.onRelease);
  } catch (err) {
    inline?.abandon();
    throw err;
  } finally {
    if (ownLanes) await lanes?.destroy();
  }
}

/** Combines the tasks' results: union of strata (in task order), summed counts. */
export function mergeScatterResults(
  results: ScatterTaskResult[],
  schema: InputSchema,
  inputs: ScatterResult['inputs'],
  buckets: number,
  censusBuckets = 0,
  onRelease?: ScatterOptions['onRelease'],
): ScatterResult {
  results.sort((a, b) => a.task - b.task);
  const ids = new Map<string, number>();
  const strata: string[] = [];
  // A stratum's counts are added into the first task's array that has it (with thousands of
  // strata, these tables are the largest thing stage 1 hands over).
  const bucketCounts: Uint32Array[] = [];
  const taskStrata = results.map((r) =>
    r.strata.map((k, local) => {
      const src = r.bucketCounts[local]!;
      let id = ids.get(k);
      if (id === undefined) {
        id = strata.length;
        ids.set(k, id);
        strata.push(k);
        bucketCounts.push(src.length === buckets ? src : new Uint32Array(buckets));
        if (src.length === buckets) return id;
      }
      const dst = bucketCounts[id]!;
      for (let b = 0; b < buckets; b++) dst[b]! += src[b]!;
      return id;
    }),
  );
  const fp = new Fingerprint();
  for (const r of results) fp.merge(r.fingerprint);
  let cellCounts: Float64Array[] | null = null;
  if (results.some((r) => r.cellCounts)) {
    cellCounts = strata.map(() => new Float64Array(0));
    results.forEach((r, t) =>
      r.cellCounts?.forEach((src, local) => {
        const u = taskStrata[t]![local]!;
        const dst = cellCounts![u]!.length ? cellCounts![u]! : (cellCounts![u] = new Float64Array(src.length));
        for (let k = 0; k < src.length; k++) dst[k]! += src[k]!;
      }),
    );
  }
  const spill = new SpillIndex(results, buckets, undefined, onRelease?.spill ?? null);
  const census = censusBuckets > 0 ? new SpillIndex(results.map((r) => r.census!), censusBuckets, undefined, onRelease?.census ?? null) : null;
  return {
    schema,
    strata,
    bucketCounts,
    taskStrata,
    spill,
    inputs,
    records: results.reduce((a, r) => a + r.records, 0),
    rejected: inputs.reduce((a, x) => a + x.rejected, 0),
    fingerprint: fp,
    cellCounts,
    census,
  };
}
