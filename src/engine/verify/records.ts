/**
 * Records as verify reads them: streamed through the same record reader the shuffle used (so a
 * record is the same byte range), each record's own bytes found again (the fold field the
 * gather stage added cut out) and hashed as the shuffle's fingerprint hashes them, and the
 * 64-bit hashes kept for listing differences.
 */
import { createHash } from 'node:crypto';
import { createReadStream, statSync } from 'node:fs';
import type { Readable } from 'node:stream';
import { Fingerprint } from '../../core/hash.js';
import { RowdeckError } from '../../errors.js';
import type { RecordBatch } from '../../io/batch.js';
import { openInput } from '../../io/input.js';
import { batchesOf, type RecordReader } from '../../io/reader.js';
import type { ReadPlan } from './read-plan.js';

/** Above this many records (input or output), a failed --against check reports counts and fingerprints only. */
export const DIFF_RECORD_LIMIT = 2_000_000;
/** Record text in the listing is cut to this many characters. */
const RECORD_TEXT_LIMIT = 200;

/** 64-bit record hashes, stored as pairs of 32-bit words (lo, hi) so they can be sorted as BigUint64. */
export class HashList {
  words = new Uint32Array(2 * 1024);
  count = 0;
  overflow = false;

  add(hi: number, lo: number): void {
    if (this.overflow) return;
    if (this.count >= DIFF_RECORD_LIMIT) {
      this.overflow = true;
      this.words = new Uint32Array(0);
      return;
    }
    if (2 * this.count === this.words.length) {
      const bigger = new Uint32Array(Math.min(2 * DIFF_RECORD_LIMIT, this.words.length * 2));
      bigger.set(this.words);
      this.words = bigger;
    }
    this.words[2 * this.count] = lo;
    this.words[2 * this.count + 1] = hi;
    this.count++;
  }

  /** Sorted in place; equal hashes end up next to each other, whatever the byte order. */
  sorted(): { big: BigUint64Array; words: Uint32Array } {
    const big = new BigUint64Array(this.words.buffer, 0, this.count);
    big.sort();
    return { big, words: this.words };
  }
}

export const hashKey = (hi: number, lo: number): string => `${hi}:${lo}`;

const DIGIT_0 = 0x30;
const DIGIT_9 = 0x39;

/**
 * Where the record's own bytes end and its fold, undoing exactly what the gather stage added:
 * CSV/TSV `<delimiter><fold>` at the end; JSON Lines `,"<name>":<fold>` (no comma in an empty
 * object) before the closing brace. Returns null when the record does not carry that field.
 */
export function splitFold(d: Buffer, s: number, e: number, plan: ReadPlan, nameBytes: Buffer): { fold: number; text: string; cutStart: number; cutEnd: number } | null {
  if (plan.format !== 'jsonl') {
    let ds = e;
    while (ds > s && d[ds - 1]! >= DIGIT_0 && d[ds - 1]! <= DIGIT_9) ds--;
    if (ds === e || ds - 1 < s || d[ds - 1] !== plan.delimiterByte) return null;
    const text = d.toString('latin1', ds, e);
    return { fold: Number(text), text, cutStart: ds - 1, cutEnd: e };
  }
  let close = e - 1;
  while (close > s && d[close] !== 0x7d) close--;
  if (d[close] !== 0x7d) return null;
  let ds = close;
  while (ds > s && d[ds - 1]! >= DIGIT_0 && d[ds - 1]! <= DIGIT_9) ds--;
  if (ds === close) return null;
  const fs = ds - nameBytes.length;
  if (fs < s || !d.subarray(fs, ds).equals(nameBytes)) return null;
  const text = d.toString('latin1', ds, close);
  return { fold: Number(text), text, cutStart: fs > s && d[fs - 1] === 0x2c ? fs - 1 : fs, cutEnd: close };
}

/**
 * The 64-bit hash one record adds to a fingerprint, as [hi, lo]: a fingerprint of that record
 * alone. Going through Fingerprint keeps verify on whatever hash the shuffle uses.
 */
const single = new Fingerprint();
const singleOut = new Uint32Array(2);
export function recordHash(buf: Uint8Array, start: number, end: number): Uint32Array {
  single.hi = 0;
  single.lo = 0;
  single.count = 0;
  single.addBytes(buf, start, end);
  singleOut[0] = single.hi;
  singleOut[1] = single.lo;
  return singleOut;
}

/** A record's own bytes (the fold field cut out), hashed like the shuffle's fingerprint. */
export class RecordHasher {
  #scratch = Buffer.alloc(4096);

  hash(d: Buffer, s: number, e: number, cut: { cutStart: number; cutEnd: number } | null): Uint32Array {
    if (cut === null) return recordHash(d, s, e);
    if (cut.cutEnd === e) return recordHash(d, s, cut.cutStart);
    const n = cut.cutStart - s + (e - cut.cutEnd);
    if (this.#scratch.length < n) this.#scratch = Buffer.alloc(Math.max(n, this.#scratch.length * 2));
    d.copy(this.#scratch, 0, s, cut.cutStart);
    d.copy(this.#scratch, cut.cutStart - s, cut.cutEnd, e);
    return recordHash(this.#scratch, 0, n);
  }

  text(d: Buffer, s: number, e: number, cut: { cutStart: number; cutEnd: number } | null): string {
    const b = cut === null ? d.subarray(s, e) : Buffer.concat([d.subarray(s, cut.cutStart), d.subarray(cut.cutEnd, e)]);
    const t = b.toString('utf8');
    return t.length > RECORD_TEXT_LIMIT ? t.slice(0, RECORD_TEXT_LIMIT) + '…' : t;
  }
}

/**
 * Bytes of a file, hashed (sha256) and counted as they stream past. Reads of up to 1 MiB, or the
 * file's size and one byte where that is less: a read stream takes a buffer of its read size for
 * every read, and thousands of small parts each took a fresh 1 MiB.
 */
export async function* hashStream(path: string, sink: { hash: ReturnType<typeof createHash>; bytes: number }): AsyncGenerator<Buffer> {
  let size = 1 << 20;
  try {
    size = Math.max(1, Math.min(size, statSync(path).size + 1));
  } catch {
    // The read reports it.
  }
  for await (const chunk of createReadStream(path, { highWaterMark: size })) {
    const b = chunk as Buffer;
    sink.hash.update(b);
    sink.bytes += b.length;
    yield b;
  }
}

export async function hashFile(path: string): Promise<{ bytes: number; sha256: string }> {
  const sink = { hash: createHash('sha256'), bytes: 0 };
  for await (const _ of hashStream(path, sink)) void _;
  return { bytes: sink.bytes, sha256: sink.hash.digest('hex') };
}

/** The bytes a JSON Lines record's fold field starts with (`"<name>":`), for splitFold. */
export function foldNameBytes(plan: ReadPlan): Buffer {
  return Buffer.from(plan.foldColumn !== null ? `${JSON.stringify(plan.foldColumn)}:` : '', 'utf8');
}

/**
 * Feeds a source through a record reader, batch by batch. A part or input with no records is
 * not an error here (the counts say whether it should have had some).
 */
export async function readAll(source: string | Readable | Buffer, reader: RecordReader, onBatch: (b: RecordBatch) => void): Promise<void> {
  try {
    for await (const b of batchesOf(reader, Buffer.isBuffer(source) ? [source] : openInput(source))) onBatch(b);
  } catch (err) {
    if (err instanceof RowdeckError && (err.code === 'RDK_INPUT_EMPTY' || err.code === 'RDK_HEADER_ONLY') && reader.stats.records === 0 && reader.stats.rejected === 0) return;
    throw err;
  }
}
