/**
 * Spill files: stage 1 appends every record, tagged with its key, to the bucket of its key range;
 * stage 2 loads one bucket at a time. The layout keeps every header 4-byte aligned so the reader
 * can look at a bucket through one Uint32Array without copying:
 *
 *   u32 keyHi | u32 keyLo | u32 offsetLo | u32 offsetHi<<16 | input | u32 stratum | u32 len<<2 | term
 *   then `len` content bytes, zero-padded to a multiple of 4.
 *
 * `term` is the record's line terminator: 0 none (last record of an input), 1 LF, 2 CRLF.
 * `stratum` is the scatter task's local stratum id; the plan maps it to the dealing order.
 *
 * Each scatter task writes a few spill files, one per range of buckets (`SPILL_FILES` at most): a
 * bucket's buffer, when full, is appended to its range's file as a chunk, and the task keeps the
 * (bucket, place, offset, length) of every chunk in one typed array (a chunk's place is -1 for its
 * range's file, or the slab that holds it, see below). Stage 2 reads a bucket as its chunks from every
 * task's file for that range, and deals the buckets in order, so it removes a range's files as
 * soon as it has passed the range: the spill shrinks as the parts grow, and the disk holds about
 * the spill and a range's parts at once instead of the spill and all the parts. One file per
 * bucket was simpler, but creating a file cost about a millisecond on the file systems measured
 * here (more than the rest of stage 1 for thousands of buckets), and it tied the bucket count to
 * the open-file limit.
 *
 * Where a chunk lies (a range's file, memory) is described in spill-places.ts.
 */
import { closeSync, openSync } from 'node:fs';
import { writeAllSync } from '../io/write-all.js';
import { join } from 'node:path';
import { ioError } from '../errors.js';
import type { Fingerprint } from '../core/hash.js';
import type { RecordBatch } from '../io/batch.js';
import { growTo, instantiate, type WasmMemory } from '../core/wasm.js';
import { SPILL_LAYOUT, SPILL_WASM_BASE64 } from './spill-wasm.js';
import { flags } from '../flags.js';

type AppendFn = (from: number, n: number, queue: number, fill: number, ends: number, fp: number) => number;
type EnqueueFn = (n: number, from: number, queue: number, offs: number, starts: number, ends: number, nexts: number,
  strata: number, secret: number, input: number, bits: number, delta: number) => void;
interface SpillKernel {
  memory: WasmMemory;
  append: AppendFn;
  enqueue: EnqueueFn;
}
/** Records queued for the module at most (a run of records staged together may hold more). */
export const QUEUE = 4096;
const SPARE = 64;

/** False once the module failed to load here (no WebAssembly SIMD). */
let spillKernelWorks = true;
/** A fresh instance of the spill module (one per writer: its memory is the writer's), or null. */
function spillKernel(): SpillKernel | null {
  if (flags.spill === 'js' || !spillKernelWorks) return null;
  const k = instantiate<SpillKernel>('spill', SPILL_WASM_BASE64, ['memory', 'append', 'enqueue']);
  spillKernelWorks = k !== null;
  return k;
}

export const HEADER_BYTES = SPILL_LAYOUT.headerBytes;
export const HEADER_WORDS = HEADER_BYTES / 4;

export { CHUNK_FIELDS, IN_FILE, IN_RAM_FILE, SPILL_FILES, spillFileName, spillRanges, storeAllowance, type SpillPiece, type SpillStore } from './spill-places.js';
import { CHUNK_FIELDS, IN_FILE, IN_RAM_FILE, spillFileName, spillRanges, type SpillStore } from './spill-places.js';


/**
 * Buffered appender for the buckets of one scatter task.
 *
 * All bucket buffers and a staging area for the incoming batch live in one memory, so each
 * record moves within it. Where WebAssembly SIMD is available (and `ROWDECK_SPILL=js` is not set)
 * that memory is a WebAssembly module's (src/engine/spill.wat): `append` only queues a record,
 * and the module writes each queued record's header and bytes and adds its fingerprint hash, a
 * run at a time (measured: JavaScript spent a builtin call per record on the copy, and re-checked
 * its array on every word of the hash). Where keys are hashed from identities, `enqueueRun` has
 * the module key, bucket and queue a whole staged run (ScatterTask's loop over records cost
 * ~170 ns a record in JavaScript). Otherwise it is an ArrayBuffer and each record moves with
 * `Uint8Array.prototype.copyWithin`, a builtin that costs a fraction of `Buffer.prototype.copy`
 * for records of ~100 bytes (measured: ~30 ns against ~200 ns).
 *
 * Memory of the module: bucket buffers (each followed by 64 spare bytes, for the 16-byte steps of
 * the copy), the staging area (and 64 spare bytes), the queue (32 bytes a record), fill and end
 * of each buffer, and the fingerprint sum.
 */
export class BucketWriter {
  /** One spill file per range of buckets (see spillRanges); created at its first chunk. */
  paths: string[];
  /** Slabs of shared memory holding chunks (the memory layout), each of one range of buckets. */
  slabs: SharedArrayBuffer[] = [];
  readonly bytes: Float64Array;
  readonly records: Float64Array;
  /** Fingerprint of every record appended, taken from the aligned copy (cheaper than from the input). */
  readonly fingerprint: Fingerprint | null;
  #fds: number[];
  #ends: number[];
  #perRange: number;
  #buckets: number;
  #chunkList = new Float64Array(CHUNK_FIELDS * 64);
  #chunkCount = 0;
  #store: SpillStore | null = null;
  /**
   * This task's files in memory, per range (SpillStore.files), and where each one ends (ranges
   * may share a file: `#ramEndOf[r]` is the first range with range r's descriptor).
   */
  #ramFds: number[] | null = null;
  #ramEnds: number[] = [];
  #ramEndOf: number[] = [];
  /** Per range: its current slab (index into `slabs`) or -1, and where that slab's free space starts. */
  #rangeSlab: Int32Array;
  #slabFill: number[] = [];
  #arena: Uint8Array;
  #buf: Buffer;
  #u32: Uint32Array;
  #fill = new Int32Array(0);
  #size: number;
  /** Distance between the starts of two buckets' buffers. */
  #stride = 0;
  #staging = 0;
  #stagingSize: number;
  /** Where the staged run's bytes lie in the arena, less where they lie in the batch (may be negative). */
  #stagingDelta = 0;
  /** Whether the last stage() call took its run into the staging area. */
  #staged = false;
  #kernel: SpillKernel | null = null;
  /** Queued records (kernel only): 8 words each, see spill.wat. */
  #queue: Uint32Array | null = null;
  #queueAt = 0;
  #queued = 0;
  #fp = 0;
  #secretAt = 0;
  #keyed = false;
  #runAt = 0;
  #runOffset: Float64Array = new Float64Array(0);
  #runStart: Uint32Array = new Uint32Array(0);
  #runEnd: Uint32Array = new Uint32Array(0);
  #runNext: Uint32Array = new Uint32Array(0);
  /** Strata of the run enqueueRun takes next (the caller fills them); empty without the module. */
  runStrata: Int32Array = new Int32Array(0);
  /** Bytes the staging area holds: callers stage a batch in runs of at most this many bytes. */
  get stagingBytes(): number {
    return this.#stagingSize;
  }

  constructor(dir: string, task: number, buckets: number, bufferBytes: number, fingerprint: Fingerprint | null = null, stagingBytes = 2 << 20, store: SpillStore | null = null) {
    this.fingerprint = fingerprint;
    this.#buckets = buckets;
    this.#takeStore(store, task);
    this.#size = Math.max(4096, bufferBytes & ~3);
    this.#stagingSize = stagingBytes;
    const kernel = spillKernel();
    let memory: ArrayBuffer;
    if (kernel) {
      this.#stride = this.#size + SPARE;
      this.#staging = this.#stride * buckets;
      this.#queueAt = Math.ceil((this.#staging + stagingBytes + SPARE) / 64) * 64;
      const fillAt = this.#queueAt + QUEUE * SPILL_LAYOUT.queueEntryBytes;
      this.#fp = fillAt + 8 * buckets;
      // enqueueRun's inputs: the key secret, then a run's offsets (f64), starts, ends, nexts and strata.
      this.#secretAt = this.#fp + 16;
      this.#runAt = this.#secretAt + 16;
      const need = this.#runAt + 24 * QUEUE + SPARE;
      if (need <= 0x7fff0000 && growTo(kernel.memory, need)) {
        this.#kernel = kernel;
        memory = kernel.memory.buffer;
        this.#queue = new Uint32Array(memory, this.#queueAt, (QUEUE * SPILL_LAYOUT.queueEntryBytes) / 4);
        this.#fill = new Int32Array(memory, fillAt, buckets);
        const ends = new Int32Array(memory, fillAt + 4 * buckets, buckets);
        for (let b = 0; b < buckets; b++) ends[b] = b * this.#stride + this.#size;
        new Uint8Array(memory, this.#fp, 16).fill(0);
        this.#runOffset = new Float64Array(memory, this.#runAt, QUEUE);
        const words = (k: number): Uint32Array => new Uint32Array(memory, this.#runAt + 8 * QUEUE + 4 * QUEUE * k, QUEUE);
        this.#runStart = words(0);
        this.#runEnd = words(1);
        this.#runNext = words(2);
        this.runStrata = new Int32Array(memory, this.#runAt + 20 * QUEUE, QUEUE);
      }
    }
    if (!this.#kernel) {
      this.#stride = this.#size;
      this.#staging = this.#size * buckets;
      memory = new ArrayBuffer(this.#staging + stagingBytes);
      this.#fill = new Int32Array(buckets);
    }
    this.#arena = new Uint8Array(memory!);
    this.#buf = Buffer.from(memory!);
    this.#u32 = new Uint32Array(memory!);
    const { ranges, perRange } = spillRanges(buckets);
    this.#perRange = perRange;
    this.paths = Array.from({ length: ranges }, (_, r) => join(dir, spillFileName(task, r)));
    this.#fds = new Array<number>(ranges).fill(-1);
    this.#ends = new Array<number>(ranges).fill(0);
    this.#rangeSlab = new Int32Array(ranges).fill(-1);
    for (let b = 0; b < buckets; b++) this.#fill[b] = b * this.#stride;
    this.bytes = new Float64Array(buckets);
    this.records = new Float64Array(buckets);
  }

  /** Takes task `task`'s part of a store (see SpillStore). */
  #takeStore(store: SpillStore | null, task: number): void {
    this.#store = store;
    this.#ramFds = null;
    if (store?.files) {
      const fds = store.files[task] ?? null;
      this.#ramFds = fds;
      this.#ramEnds = new Array<number>(fds?.length ?? 0).fill(0);
      this.#ramEndOf = (fds ?? []).map((fd) => fds!.indexOf(fd));
      if (!fds) this.#store = null;
    }
  }

  /** This task's files in memory, per range (empty where it has none). */
  get ramFiles(): number[] {
    return this.#ramFds ? [...this.#ramFds] : [];
  }

  /** Every chunk written so far: CHUNK_FIELDS numbers each (a view, valid until the next write). */
  get chunks(): Float64Array {
    return this.#chunkList.subarray(0, this.#chunkCount * CHUNK_FIELDS);
  }

  /**
   * Starts over, after close(), with new files named for `task` in `dir` (or `store`'s) and
   * nothing written: the same buckets and buffers (a thread that splits bucket after bucket keeps
   * one writer).
   */
  restart(dir: string, task: number, store: SpillStore | null = null): void {
    if (this.#fds.some((fd) => fd >= 0) || this.#queued > 0) throw new Error('internal: BucketWriter.restart before close');
    const { ranges } = spillRanges(this.#buckets);
    this.paths = Array.from({ length: ranges }, (_, r) => join(dir, spillFileName(task, r)));
    this.#ends.fill(0);
    this.#takeStore(store, task);
    this.#rangeSlab.fill(-1);
    this.slabs = [];
    this.#slabFill = [];
    this.#chunkCount = 0;
    for (let b = 0; b < this.#buckets; b++) this.#fill[b] = b * this.#stride;
    this.bytes.fill(0);
    this.records.fill(0);
  }

  /**
   * Brings a batch's bytes into the arena (one copy per batch); later `append` calls on the same
   * `data` copy from there. Batches larger than the staging area take the slower per-record path.
   */
  stage(data: Buffer, start: number, end: number): void {
    // Queued records still point into the staging area.
    this.#drain();
    if (end - start <= this.#stagingSize) {
      this.#arena.set(data.subarray(start, end), this.#staging);
      this.#stagingDelta = this.#staging - start;
      this.#staged = true;
    } else {
      this.#staged = false;
    }
  }

  /** Whether enqueueRun is available: the module writes the records, and the key secret is set. */
  get enqueues(): boolean {
    return this.#keyed;
  }

  /** The secret enqueueRun's keys are hashed with (hash.ts: hashWords3). */
  setKeySecret(secret: Uint32Array): void {
    if (this.#queue === null) return;
    new Uint32Array(this.#arena.buffer, this.#secretAt, 4).set(secret);
    this.#keyed = true;
  }

  /**
   * Appends records i0..i1 of a batch (at most QUEUE, all inside the run the last stage() call
   * took; their strata in `runStrata[0, i1 - i0)`), each keyed by the hash of (input, offset)
   * and put in the bucket of its key's top `bits` bits, as `append` would be called for each.
   * `bucketCounts[stratum][bucket]` counts them.
   */
  enqueueRun(b: RecordBatch, i0: number, i1: number, input: number, bits: number, bucketCounts: Uint32Array[]): void {
    const n = i1 - i0;
    if (!this.#keyed || !this.#staged || n > QUEUE) throw new Error('internal: enqueueRun needs the key secret and a staged run of at most QUEUE records');
    if (this.#queued + n > QUEUE) this.#drain();
    this.#runOffset.set(b.offset.subarray(i0, i1));
    this.#runStart.set(b.start.subarray(i0, i1));
    this.#runEnd.set(b.end.subarray(i0, i1));
    this.#runNext.set(b.next.subarray(i0, i1));
    const from = this.#queued;
    const at = this.#runAt;
    this.#kernel!.enqueue(n, from, this.#queueAt, at, at + 8 * QUEUE, at + 12 * QUEUE, at + 16 * QUEUE, at + 20 * QUEUE,
      this.#secretAt, input, bits, this.#stagingDelta);
    const q = this.#queue!, bytes = this.bytes, records = this.records, strata = this.runStrata;
    for (let k = 0; k < n; k++) {
      const w = (from + k) << 3;
      const bucket = q[w]!;
      bytes[bucket]! += HEADER_BYTES + (((q[w + 7]! >>> 2) + 3) & ~3);
      records[bucket]! += 1;
      bucketCounts[strata[k]!]![bucket]!++;
    }
    this.#queued = from + n;
    if (this.#queued === QUEUE) this.#drain();
  }

  /** Appends one record. `term`: 0 none, 1 LF, 2 CRLF. */
  append(
    bucket: number,
    keyHi: number,
    keyLo: number,
    offset: number,
    input: number,
    stratum: number,
    data: Buffer,
    start: number,
    end: number,
    term: number,
  ): void {
    const len = end - start;
    const need = HEADER_BYTES + ((len + 3) & ~3);
    const q = this.#queue;
    if (q !== null && this.#staged) {
      // The module writes it (see #drain).
      const k = this.#queued++ << 3;
      q[k] = bucket;
      q[k + 1] = keyHi;
      q[k + 2] = keyLo;
      q[k + 3] = offset % 0x100000000;
      q[k + 4] = (Math.floor(offset / 0x100000000) << 16) | input;
      q[k + 5] = stratum;
      q[k + 6] = start + this.#stagingDelta;
      q[k + 7] = (len << 2) | term;
      this.bytes[bucket]! += need;
      this.records[bucket]! += 1;
      if (this.#queued === QUEUE) this.#drain();
      return;
    }
    this.#drain();
    const base = bucket * this.#stride;
    let fill = this.#fill[bucket]!;
    if (fill + need > base + this.#size) {
      this.#flush(bucket);
      fill = base;
      if (need > this.#size) {
        this.#writeLarge(bucket, keyHi, keyLo, offset, input, stratum, data, start, end, term);
        return;
      }
    }
    const u = this.#u32;
    const w = fill >>> 2;
    u[w] = keyHi;
    u[w + 1] = keyLo;
    u[w + 2] = offset % 0x100000000;
    u[w + 3] = (Math.floor(offset / 0x100000000) << 16) | input;
    u[w + 4] = stratum;
    u[w + 5] = (len << 2) | term;
    const at = fill + HEADER_BYTES;
    // Zero the last word first: the copy overwrites its leading bytes, padding stays zero.
    if (len & 3) u[(at + len) >>> 2] = 0;
    if (this.#staged) this.#arena.copyWithin(at, start + this.#stagingDelta, end + this.#stagingDelta);
    else data.copy(this.#buf, at, start, end);
    this.#fill[bucket] = fill + need;
    this.fingerprint?.addAligned(u, w + HEADER_WORDS, len);
    this.bytes[bucket]! += need;
    this.records[bucket]! += 1;
  }

  /** Has the module write the queued records; a bucket that fills up is written to the file first. */
  #drain(): void {
    const n = this.#queued;
    if (n === 0) return;
    const kernel = this.#kernel!;
    const q = this.#queue!;
    let from = 0;
    for (;;) {
      from = kernel.append(from, n, this.#queueAt, this.#fill.byteOffset, this.#fill.byteOffset + 4 * this.#fill.length, this.#fp);
      if (from >= n) break;
      // Record `from` does not fit its bucket's buffer: write the buffer out, then it fits, or
      // (longer than a buffer) it goes to the file on its own.
      const k = from << 3;
      const bucket = q[k]!;
      this.#flush(bucket);
      const len = q[k + 7]! >>> 2;
      if (HEADER_BYTES + ((len + 3) & ~3) > this.#size) {
        const offset = q[k + 3]! + ((q[k + 4]! >>> 16) * 0x100000000);
        const s = q[k + 6]!;
        this.#writeLarge(bucket, q[k + 1]!, q[k + 2]!, offset, q[k + 4]! & 0xffff, q[k + 5]!, this.#buf, s, s + len, q[k + 7]! & 3, false);
        from++;
      }
    }
    this.#queued = 0;
  }

  /** One record longer than a bucket's buffer, straight to the file. `count`: add it to the bucket's totals (a queued record was added when it was queued). */
  #writeLarge(bucket: number, keyHi: number, keyLo: number, offset: number, input: number, stratum: number, data: Buffer, start: number, end: number, term: number, count = true): void {
    const len = end - start;
    const rec = Buffer.alloc(HEADER_BYTES + ((len + 3) & ~3));
    rec.writeUInt32LE(keyHi, 0);
    rec.writeUInt32LE(keyLo, 4);
    rec.writeUInt32LE(offset % 0x100000000, 8);
    rec.writeUInt32LE(((Math.floor(offset / 0x100000000) << 16) | input) >>> 0, 12);
    rec.writeUInt32LE(stratum, 16);
    rec.writeUInt32LE(((len << 2) | term) >>> 0, 20);
    data.copy(rec, HEADER_BYTES, start, end);
    this.fingerprint?.addBytes(rec, HEADER_BYTES, HEADER_BYTES + len);
    this.#write(bucket, rec, 0, rec.length);
    if (count) {
      this.bytes[bucket]! += rec.length;
      this.records[bucket]! += 1;
    }
  }

  /** Notes a chunk of `bucket` at `place` (IN_FILE, IN_RAM_FILE or a slab). */
  #noteChunk(bucket: number, place: number, offset: number, length: number): void {
    let list = this.#chunkList;
    const at = this.#chunkCount * CHUNK_FIELDS;
    if (at + CHUNK_FIELDS > list.length) {
      list = new Float64Array(list.length * 2);
      list.set(this.#chunkList);
      this.#chunkList = list;
    }
    list[at] = bucket;
    list[at + 1] = place;
    list[at + 2] = offset;
    list[at + 3] = length;
    this.#chunkCount++;
  }

  /** Keeps a chunk in memory (see the module's comment); false once the allowance is spent or the memory file system is full. */
  #keep(r: number, bucket: number, buf: Buffer, from: number, to: number): boolean {
    if (this.#ramFds) return this.#keepInFile(r, bucket, buf, from, to);
    const store = this.#store!;
    const len = to - from;
    let k = this.#rangeSlab[r]!;
    if (k < 0 || this.#slabFill[k]! + len > this.slabs[k]!.byteLength) {
      const size = Math.max(store.slabBytes, len);
      const kib = Math.ceil(size / 1024);
      const allowance = new Int32Array(store.allowance);
      if (Atomics.sub(allowance, 0, kib) < kib) {
        Atomics.add(allowance, 0, kib);
        this.#store = null;
        return false;
      }
      k = this.slabs.length;
      this.slabs.push(new SharedArrayBuffer(size));
      this.#slabFill.push(0);
      this.#rangeSlab[r] = k;
    }
    const at = this.#slabFill[k]!;
    new Uint8Array(this.slabs[k]!, at, len).set(buf.subarray(from, to));
    this.#slabFill[k] = at + len;
    this.#noteChunk(bucket, k, at, len);
    return true;
  }

  /** Appends a chunk to its range's file in memory, its size taken from the allowance. */
  #keepInFile(r: number, bucket: number, buf: Buffer, from: number, to: number): boolean {
    const len = to - from;
    const kib = Math.ceil(len / 1024);
    const allowance = new Int32Array(this.#store!.allowance);
    if (Atomics.sub(allowance, 0, kib) < kib) {
      Atomics.add(allowance, 0, kib);
      this.#store = null;
      return false;
    }
    const fd = this.#ramFds![r]!;
    const e = this.#ramEndOf[r]!;
    const end = this.#ramEnds[e]!;
    try {
      writeAllSync(fd, buf.subarray(from, to), end);
    } catch (err) {
      // Full (its size limit, or a quota): what is there stays, the rest goes to the spill files.
      const code = (err as NodeJS.ErrnoException).code;
      if (code !== 'ENOSPC' && code !== 'EDQUOT' && code !== 'EFBIG') throw ioError(err, `a file in memory (range ${r})`, 'keeping the spill in memory');
      Atomics.add(allowance, 0, kib);
      this.#store = null;
      return false;
    }
    this.#ramEnds[e] = end + len;
    this.#noteChunk(bucket, IN_RAM_FILE, end, len);
    return true;
  }

  /** Appends bytes to the bucket's range file (or memory) as one chunk of `bucket`. */
  #write(bucket: number, buf: Buffer, from: number, to: number): void {
    if (to <= from) return;
    const r = Math.floor(bucket / this.#perRange);
    if (this.#store && this.#keep(r, bucket, buf, from, to)) return;
    const path = this.paths[r]!;
    if (this.#fds[r] === -1) {
      try {
        this.#fds[r] = openSync(path, 'w');
      } catch (err) {
        throw ioError(err, path, 'creating a spill file');
      }
    }
    const end = this.#ends[r]!;
    try {
      writeAllSync(this.#fds[r]!, buf.subarray(from, to), end);
    } catch (err) {
      throw ioError(err, path, 'writing a spill file');
    }
    this.#noteChunk(bucket, IN_FILE, end, to - from);
    this.#ends[r] = end + (to - from);
  }

  #flush(bucket: number): void {
    const base = bucket * this.#stride;
    const fill = this.#fill[bucket]!;
    if (fill > base) this.#write(bucket, this.#buf, base, fill);
    this.#fill[bucket] = base;
  }

  /** Flushes every bucket and closes the file. */
  close(): void {
    try {
      this.#drain();
      for (let b = 0; b < this.#buckets; b++) this.#flush(b);
      if (this.#kernel && this.fingerprint) {
        // The module's sum of the records it wrote.
        const u = this.#u32;
        const w = this.#fp >>> 2;
        this.fingerprint.merge({ lo: u[w]!, hi: u[w + 1]!, count: u[w + 2]! + u[w + 3]! * 0x100000000 });
        u.fill(0, w, w + 4);
      }
    } finally {
      this.#closeFile();
    }
  }

  /** Drops buffered data (on failure; the files are removed with the spill folder). A failure
   * to close is not reported: the error that led here is the one that matters. */
  abandon(): void {
    this.#queued = 0;
    for (let b = 0; b < this.#buckets; b++) this.#fill[b] = b * this.#stride;
    try {
      this.#closeFile();
    } catch {
      // Every file was still closed (see #closeFile).
    }
  }

  /** Closes every range's file; the first failure is thrown once all are closed. */
  #closeFile(): void {
    let failure: unknown = null;
    for (let r = 0; r < this.#fds.length; r++) {
      const fd = this.#fds[r]!;
      if (fd < 0) continue;
      this.#fds[r] = -1;
      try {
        closeSync(fd);
      } catch (err) {
        failure ??= ioError(err, this.paths[r]!, 'closing a spill file');
      }
    }
    if (failure) throw failure;
  }
}
