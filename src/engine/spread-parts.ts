/**
 * `--order spread`: each part is put in order once all its records are dealt.
 *
 * Which class fills each position of a part follows from the part's class counts alone
 * (core/spread.ts), but a record's position does not follow from its bucket: the first record of
 * a rare class can come from the last bucket. So stage 2 keeps each class's records apart: every
 * bucket's slice of a part comes laid out class by class (gather.ts, units), and is appended
 * here to one file of records and one of their sizes, with the place of each (part, class)
 * chunk. Once every bucket is in, a part is written position by position, each from the next
 * record of its class (in shuffled order), read back chunk by chunk. This costs one more write
 * and read of the output, and keeps a chunk a class in memory while a part is written.
 */
import { closeSync, openSync, readSync } from 'node:fs';
import { writeAllSync } from '../io/write-all.js';
import { join } from 'node:path';
import { SpreadOrder } from '../core/spread.js';
import { ioError, RowdeckError } from '../errors.js';
import type { PartWriter } from '../io/part-writer.js';

/** Where one bucket's records of one (part, class) lie: bytes, sizes, and how many (and, read from several runs' files, whose). */
export interface SpreadChunk {
  offset: number;
  length: number;
  sizesAt: number;
  records: number;
  source?: number;
}
type Chunk = SpreadChunk;

/** Writes to a file at its end, keeping track of that end. */
class AppendFile {
  readonly path: string;
  readonly fd: number;
  end = 0;
  constructor(path: string, readOnly = false) {
    this.path = path;
    try {
      this.fd = openSync(path, readOnly ? 'r' : 'w+');
    } catch (err) {
      throw ioError(err, path, readOnly ? 'opening a work file' : 'creating a work file');
    }
  }
  append(buf: Uint8Array): number {
    const at = this.end;
    try {
      writeAllSync(this.fd, buf, at);
    } catch (err) {
      throw ioError(err, this.path, 'writing a work file');
    }
    this.end += buf.byteLength;
    return at;
  }
  read(into: Uint8Array, length: number, at: number): void {
    try {
      for (let got = 0; got < length; ) {
        const n = readSync(this.fd, into, got, length - got, at + got);
        if (n === 0) throw new RowdeckError('RDK_INTERNAL', `${this.path} ended early: the work folder was changed during the run.`);
        got += n;
      }
    } catch (err) {
      throw ioError(err, this.path, 'reading a work file');
    }
  }
  close(): void {
    closeSync(this.fd);
  }
}

/** The records of one (part, class), in shuffled order, a chunk at a time. */
class ClassRecords {
  readonly #chunks: Chunk[];
  readonly #data: AppendFile[];
  readonly #sizeFile: AppendFile[];
  #next = 0;
  #bytes = Buffer.alloc(0);
  #sizes = new Uint32Array(0);
  #count = 0;
  #k = 0;
  #at = 0;

  constructor(chunks: Chunk[], data: AppendFile[], sizes: AppendFile[]) {
    this.#chunks = chunks;
    this.#data = data;
    this.#sizeFile = sizes;
  }

  /** The next record's bytes (valid until the next call). */
  take(): Buffer {
    if (this.#k === this.#count) this.#load();
    const size = this.#sizes[this.#k++]!;
    const rec = this.#bytes.subarray(this.#at, this.#at + size);
    this.#at += size;
    return rec;
  }

  #load(): void {
    const c = this.#chunks[this.#next++];
    if (!c) throw new RowdeckError('RDK_INTERNAL', 'spread order: a class ran out of records before its count.');
    if (this.#bytes.length < c.length) this.#bytes = Buffer.allocUnsafe(Math.max(c.length, 2 * this.#bytes.length));
    if (this.#sizes.length < c.records) this.#sizes = new Uint32Array(Math.max(c.records, 2 * this.#sizes.length));
    const source = c.source ?? 0;
    this.#data[source]!.read(this.#bytes, c.length, c.offset);
    this.#sizeFile[source]!.read(new Uint8Array(this.#sizes.buffer, 0, 4 * c.records), 4 * c.records, c.sizesAt);
    this.#count = c.records;
    this.#k = 0;
    this.#at = 0;
  }
}

export const SPREAD_RECORDS = 'spread-records.bin';
export const SPREAD_SIZES = 'spread-sizes.bin';

export class SpreadParts {
  readonly #strata: number;
  readonly #chunks: Chunk[][];
  /** The files chunks are written to (one), or read from (one a run, by SpreadChunk.source). */
  readonly #data: AppendFile[];
  readonly #sizes: AppendFile[];

  /**
   * Work files go to `dir` (the spill folder, or a gather task's folder). With `runs`, nothing is
   * written: the work files of several runs (a plan's gather tasks, in bucket order) are read as
   * one, each unit's chunks those of the first run, then the second's, and so on.
   */
  constructor(dir: string, parts: number, strata: number, runs?: { dir: string; chunks: SpreadChunk[][] }[]) {
    this.#strata = strata;
    this.#chunks = Array.from({ length: parts * strata }, () => []);
    if (runs) {
      runs.forEach((r, source) => r.chunks.forEach((list, u) => {
        for (const c of list) this.#chunks[u]!.push({ ...c, source });
      }));
      this.#data = runs.map((r) => new AppendFile(join(r.dir, SPREAD_RECORDS), true));
      this.#sizes = runs.map((r) => new AppendFile(join(r.dir, SPREAD_SIZES), true));
    } else {
      this.#data = [new AppendFile(join(dir, SPREAD_RECORDS))];
      this.#sizes = [new AppendFile(join(dir, SPREAD_SIZES))];
    }
  }

  /** Every unit's chunks (to be read by another process: see the constructor's `runs`). */
  chunkList(): SpreadChunk[][] {
    return this.#chunks;
  }

  /** One bucket's units (GatherResult.spread), in bucket order. */
  add(data: Uint8Array, unitStart: Float64Array, spread: { sizes: Uint32Array; records: Uint32Array }): void {
    let rec = 0;
    for (let u = 0; u < this.#chunks.length; u++) {
      const records = spread.records[u]!;
      if (records === 0) continue;
      const a = unitStart[u]!;
      const e = unitStart[u + 1]!;
      const offset = this.#data[0]!.append(data.subarray(a, e));
      const sizesAt = this.#sizes[0]!.append(new Uint8Array(spread.sizes.buffer, spread.sizes.byteOffset + 4 * rec, 4 * records));
      this.#chunks[u]!.push({ offset, length: e - a, sizesAt, records });
      rec += records;
    }
  }

  /**
   * Writes part `part` to `writer` in spread order: `counts[s]` records of stratum s (dealing
   * order, which breaks the order's ties, so they fall differently for every seed).
   */
  async writePart(part: number, counts: ArrayLike<number>, writer: PartWriter): Promise<void> {
    const S = this.#strata;
    const streams = Array.from({ length: S }, (_, s) => new ClassRecords(this.#chunks[part * S + s]!, this.#data, this.#sizes));
    const order = new SpreadOrder(counts);
    const out = Buffer.allocUnsafe(1 << 20);
    let fill = 0;
    for (let c = order.next(); c >= 0; c = order.next()) {
      const rec = streams[c]!.take();
      if (fill + rec.length > out.length) {
        if (fill > 0) await writer.write(out.subarray(0, fill));
        fill = 0;
        if (rec.length > out.length) {
          await writer.write(rec);
          continue;
        }
      }
      rec.copy(out, fill);
      fill += rec.length;
    }
    if (fill > 0) await writer.write(out.subarray(0, fill));
    // This part's chunks are done with.
    for (let s = 0; s < S; s++) this.#chunks[part * S + s] = [];
  }

  close(): void {
    for (const f of [...this.#data, ...this.#sizes]) f.close();
  }
}
