/**
 * Record reader: a push parser over Buffers that turns CSV/TSV/JSON Lines bytes into record
 * batches (byte ranges, see core/record-batch.ts). No fs or stream imports here; src/io/input.ts
 * adapts files.
 *
 *   reader.ts         RecordReader: what callers use, whatever the format
 *   reader-state.ts   what both formats share: options, counts, the carried partial record,
 *                     the output arrays, push() and end()
 *   csv-records.ts    CSV/TSV in bulk (the word-at-a-time scans), on csv-walk.ts: one record
 *                     at a time where quoting must be judged, the header, long records
 *   jsonl-records.ts  JSON Lines
 *   fields.ts         a CSV record's fields, and the errors about columns
 */

import type { InputSchema, RecordBatch } from './batch.js';
import { CsvRecords } from './csv-records.js';
import { JsonlRecords } from './jsonl-records.js';
import type { ReaderCounts, ReaderState, RecordReaderOptions } from './reader-state.js';

export { MAX_RECORD_BYTES, type ReaderCounts, type RecordReaderOptions } from './reader-state.js';

/**
 * Push parser: feed chunks with push(), then call end(). Each call returns the complete records
 * seen so far as one batch (or null). The batch's typed arrays and `data` are reused and
 * overwritten by the next push()/end(): copy what you keep.
 *
 * The format's rules are at the top of csv-records.ts and jsonl-records.ts.
 */
export class RecordReader {
  readonly #records: ReaderState;

  /**
   * `recycle`: a reader done with (its last batch used up) whose output arrays this one takes
   * over, with the same number of wanted fields (see ReaderState).
   */
  constructor(opts: RecordReaderOptions, recycle?: RecordReader) {
    const from = recycle === undefined ? undefined : recycle.#records;
    this.#records = opts.format === 'jsonl' ? new JsonlRecords(opts, from) : new CsvRecords(opts, from);
  }

  /** Records, refused records, bytes and lines read so far. */
  get stats(): ReaderCounts {
    return this.#records.stats;
  }

  get schema(): InputSchema | null {
    return this.#records.schema;
  }

  /** Input offset where the next record starts: everything before it has been returned or refused. */
  get resumeOffset(): number {
    return this.#records.resumeOffset;
  }

  /** Physical line on which the next record starts. */
  get nextLine(): number {
    return this.#records.nextLine;
  }

  /**
   * Takes the schema another reader learned from the input's start, so this one can read from
   * the middle of the input: no BOM or header is looked for, and `end()` does not ask for a
   * first record. Used with `resumeAt` (push from an offset) or `parseBlock` (parallel reading).
   */
  adoptSchema(schema: InputSchema): void {
    this.#records.adoptSchema(schema);
  }

  /** Starts reading at input offset `offset`, a record start, on physical line `line` (push on from there). */
  resumeAt(offset: number, line: number): void {
    this.#records.resumeAt(offset, line);
  }

  /**
   * Reads the records of `d[pos..]` as a self-contained range: `d[0]` is at input offset
   * `baseOffset` and `d[pos]` is a record start on line 1 (callers shift line numbers later).
   * Complete records come back as one batch; with `atEnd` false, a partial record at the end is
   * left out. Needs `adoptSchema` first. The batch is valid until the next call.
   */
  parseBlock(d: Buffer, pos: number, atEnd: boolean, baseOffset: number): RecordBatch | null {
    return this.#records.parseBlock(d, pos, atEnd, baseOffset);
  }

  push(chunk: Buffer): RecordBatch | null {
    return this.#records.push(chunk);
  }

  end(): RecordBatch | null {
    return this.#records.end();
  }
}

/**
 * Chunks through a reader, batch by batch (each valid until the next is asked for), the last
 * from `end()`; the first `skip` bytes are passed over (a part's header). Every read of records
 * from whole bytes goes through here (src/io/drive.ts).
 */
export async function* batchesOf(reader: RecordReader, chunks: AsyncIterable<Buffer> | Iterable<Buffer>, skip = 0): AsyncGenerator<RecordBatch> {
  for await (const chunk of chunks) {
    let c = chunk;
    if (skip > 0) {
      const n = Math.min(skip, c.length);
      skip -= n;
      c = c.subarray(n);
      if (c.length === 0) continue;
    }
    const batch = reader.push(c);
    if (batch) yield batch;
  }
  const last = reader.end();
  if (last) yield last;
}
