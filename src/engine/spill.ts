/**
 * Spill files: stage 1 appends every record, tagged with its key, to the bucket file of its key
 * range; stage 2 loads one bucket at a time. The layout keeps every header 4-byte aligned so the
 * reader can look at a bucket through one Uint32Array without copying:
 *
 *   u32 keyHi | u32 keyLo | u32 offsetLo | u32 offsetHi<<16 | input | u32 stratum | u32 len<<2 | term
 *   then `len` content bytes, zero-padded to a multiple of 4.
 *
 * `term` is the record's line terminator: 0 none (last record of an input), 1 LF, 2 CRLF.
 * `stratum` is the scatter task's local stratum id; the plan maps it to the dealing order.
 */
import { closeSync, openSync, writeSync } from 'node:fs';
import { join } from 'node:path';
import { ioError } from '../errors.js';

export const HEADER_BYTES = 24;
export const HEADER_WORDS = 6;

export function bucketFileName(task: number, bucket: number): string {
  return `scatter-${String(task).padStart(4, '0')}-bucket-${String(bucket).padStart(5, '0')}.spill`;
}

/** Buffered appender for all bucket files of one scatter task. */
export class BucketWriter {
  readonly paths: string[];
  readonly bytes: Float64Array;
  readonly records: Float64Array;
  /** Files are opened per flush, not held open, so the bucket count is not bounded by the fd limit. */
  #created: boolean[];
  #bufs: Buffer[];
  #u32: Uint32Array[];
  #fill: Int32Array;
  #size: number;

  constructor(dir: string, task: number, buckets: number, bufferBytes: number) {
    this.#size = Math.max(4096, bufferBytes & ~3);
    this.paths = [];
    this.#created = [];
    this.#bufs = [];
    this.#u32 = [];
    this.#fill = new Int32Array(buckets);
    this.bytes = new Float64Array(buckets);
    this.records = new Float64Array(buckets);
    for (let b = 0; b < buckets; b++) {
      const p = join(dir, bucketFileName(task, b));
      this.paths.push(p);
      this.#created.push(false);
      const buf = Buffer.allocUnsafe(this.#size);
      this.#bufs.push(buf);
      this.#u32.push(new Uint32Array(buf.buffer, buf.byteOffset, buf.byteLength >>> 2));
    }
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
    let fill = this.#fill[bucket]!;
    if (fill + need > this.#size) {
      this.#flush(bucket);
      fill = 0;
      if (need > this.#size) {
        this.#writeLarge(bucket, keyHi, keyLo, offset, input, stratum, data, start, end, term);
        return;
      }
    }
    const u = this.#u32[bucket]!;
    const w = fill >>> 2;
    u[w] = keyHi;
    u[w + 1] = keyLo;
    u[w + 2] = offset % 0x100000000;
    u[w + 3] = (Math.floor(offset / 0x100000000) << 16) | input;
    u[w + 4] = stratum;
    u[w + 5] = (len << 2) | term;
    const buf = this.#bufs[bucket]!;
    data.copy(buf, fill + HEADER_BYTES, start, end);
    const padded = fill + need;
    for (let p = fill + HEADER_BYTES + len; p < padded; p++) buf[p] = 0;
    this.#fill[bucket] = padded;
    this.bytes[bucket]! += need;
    this.records[bucket]! += 1;
  }

  #writeLarge(bucket: number, keyHi: number, keyLo: number, offset: number, input: number, stratum: number, data: Buffer, start: number, end: number, term: number): void {
    const len = end - start;
    const rec = Buffer.alloc(HEADER_BYTES + ((len + 3) & ~3));
    rec.writeUInt32LE(keyHi, 0);
    rec.writeUInt32LE(keyLo, 4);
    rec.writeUInt32LE(offset % 0x100000000, 8);
    rec.writeUInt32LE(((Math.floor(offset / 0x100000000) << 16) | input) >>> 0, 12);
    rec.writeUInt32LE(stratum, 16);
    rec.writeUInt32LE(((len << 2) | term) >>> 0, 20);
    data.copy(rec, HEADER_BYTES, start, end);
    this.#write(bucket, rec, rec.length);
    this.bytes[bucket]! += rec.length;
    this.records[bucket]! += 1;
  }

  #write(bucket: number, buf: Buffer, n: number): void {
    const path = this.paths[bucket]!;
    let fd = -1;
    try {
      fd = openSync(path, this.#created[bucket] ? 'a' : 'w');
      this.#created[bucket] = true;
      let off = 0;
      while (off < n) off += writeSync(fd, buf, off, n - off);
    } catch (err) {
      throw ioError(err, path, 'writing a spill file');
    } finally {
      if (fd >= 0) closeSync(fd);
    }
  }

  #flush(bucket: number): void {
    const fill = this.#fill[bucket]!;
    if (fill > 0) this.#write(bucket, this.#bufs[bucket]!, fill);
    this.#fill[bucket] = 0;
  }

  /** Flushes every bucket; buckets that received nothing get an empty file. */
  close(): void {
    for (let b = 0; b < this.paths.length; b++) {
      this.#flush(b);
      if (!this.#created[b]) this.#write(b, this.#bufs[b]!, 0);
    }
  }

  /** Drops buffered data (on failure; the files are removed with the spill folder). */
  abandon(): void {
    this.#fill.fill(0);
  }
}

/** A loaded bucket: record header positions (in 32-bit words) over one buffer. */
export interface BucketView {
  buf: Buffer;
  u32: Uint32Array;
  /** Word index of each record's header. */
  at: Uint32Array;
  count: number;
}

export function viewBucket(buf: Buffer): BucketView {
  if (buf.byteOffset % 4 !== 0) buf = Buffer.from(buf);
  const u32 = new Uint32Array(buf.buffer, buf.byteOffset, buf.byteLength >>> 2);
  let count = 0;
  const words = u32.length;
  for (let w = 0; w < words; ) {
    const len = u32[w + 5]! >>> 2;
    w += HEADER_WORDS + ((len + 3) >>> 2);
    count++;
  }
  const at = new Uint32Array(count);
  for (let w = 0, i = 0; w < words; i++) {
    at[i] = w;
    const len = u32[w + 5]! >>> 2;
    w += HEADER_WORDS + ((len + 3) >>> 2);
  }
  return { buf, u32, at, count };
}
