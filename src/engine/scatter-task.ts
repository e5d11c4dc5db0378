/**
 * One scatter task of stage 1 (see scatter.ts): the per-record work for the batches it is given,
 * on a worker (shuffle-worker.ts) or the calling thread. Each record gets its key, stratum and
 * bucket and is appended to its bucket's spill; the task counts records per (bucket, stratum),
 * per hash-mode cell where asked, and feeds the census spill in group mode.
 */
import { join } from 'node:path';
import { FieldKind, type RecordBatch } from '../io/batch.js';
import { Fingerprint, hashBytes, hashWords3, type Secret } from '../core/hash.js';
import { hashedCell, type DealSpec } from '../core/deal.js';
import { readSmallInput } from '../io/small-inputs.js';
import type { SmallInputMessage, SmallInputReply } from '../workers/protocol.js';
import { BucketWriter, QUEUE, type SpillStore } from './spill.js';
import { ByteIdTable } from '../core/byte-table.js';
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

/** The worker's side of a SmallInputMessage for a scatter task (see src/io/small-inputs.ts). */
export function addSmallInput(task: ScatterTask, m: SmallInputMessage): SmallInputReply {
  return readSmallInput(m, (batch) => task.addBatch(batch, m.input));
}

/** The census spill's folder, inside the spill folder. */
export function censusDir(spillDir: string): string {
  return join(spillDir, 'census');
}
