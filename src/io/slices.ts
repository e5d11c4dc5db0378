/**
 * Reading a byte range of a plain input as its own piece of work (a cluster's scatter task), so
 * that the records it yields are those a front-to-back read finds there.
 *
 * A slice [a, b) holds the records that start at or after its true first record start and before
 * the first record start at or after b (its end). Where a slice begins is guessed, unless known:
 * the byte after a line end at or after a − 1, the first one whose next records read as whole
 * records of the input's width outside quotes (a CSV line end inside a quoted field is followed by
 * the rest of that field, which rarely does). The guess can still be wrong; the read then reports
 * the start it used, and whoever sees all the slices checks each start against the end of the
 * slice before (the same chain the worker threads' blocks keep, io/blocks.ts) and reads a wrong
 * slice again from the right start: a wrong guess costs time, never bytes.
 *
 * Near b the bytes go to the reader a line at a time, so that nothing past the end's record start
 * is parsed: a malformed record there belongs to the next slice, and must not stop this one.
 * Line numbers count from the slice's start (line 1); the caller shifts them once the lines of
 * the slices before are known.
 */
import { createReadStream } from 'node:fs';
import { open } from 'node:fs/promises';
import type { InputSchema, RecordBatch } from './batch.js';
import { RecordReader, type RecordReaderOptions } from './reader.js';
import { systemError } from '../errors.js';

export interface InputSlice {
  /** Input ordinal (its place among all the inputs). */
  input: number;
  /** Byte range [start, end) the slice is cut at; end -1: to the end of the input. */
  start: number;
  end: number;
  /** `start` is a known record start (0, or a start checked against the slice before). */
  exact: boolean;
}

export interface SliceRead {
  /** The record start the slice was read from. */
  start: number;
  /** The first record start at or after the cut (the input's size at its end). */
  end: number;
  /** Line ends from `start` to `end`. */
  lines: number;
  records: number;
  /** Bytes of the input read (from `start`). */
  bytes: number;
  rejected: number;
}

/** What a record of the input looks like, for telling a record start from a line end inside quotes. */
export interface RecordShape {
  delimiter: number;
  columns: number;
}

/** Records a candidate start must begin with (fewer when the window ends first). */
const PLAUSIBLE_RECORDS = 4;
const GUESS_WINDOW = 1 << 20;

/**
 * How many whole records of `shape.columns` fields `buf` holds from `from`, read outside quotes
 * (RFC 4180: a quote opens a field, a doubled quote inside it is data, the closing quote is
 * followed by a delimiter or a line end; no quote inside an unquoted field), up to `want`; -1
 * when the bytes contradict that reading. Stops without contradiction at the window's end, unless
 * `atEnd` (the window ends where the input does): a quoted field still open there is a
 * contradiction, and a last record without a line end counts.
 */
export function plausibleRecords(buf: Uint8Array, from: number, shape: RecordShape, want: number, atEnd = false): number {
  const Q = 0x22;
  const LF = 0x0a;
  const CR = 0x0d;
  const d = shape.delimiter;
  let i = from;
  let records = 0;
  let fields = 0;
  while (i < buf.length && records < want) {
    if (buf[i] === Q) {
      // A quoted field: to its closing quote.
      let j = i + 1;
      for (;;) {
        j = buf.indexOf(Q, j);
        if (j < 0) return atEnd ? -1 : records;
        if (j + 1 >= buf.length) return atEnd && fields + 1 === shape.columns ? records + 1 : records;
        if (buf[j + 1] === Q) j += 2;
        else break;
      }
      i = j + 1;
      const c = buf[i]!;
      if (c === CR) {
        if (i + 1 >= buf.length) return records;
        if (buf[i + 1] !== LF) return -1;
        i++;
      } else if (c !== d && c !== LF) return -1;
    } else {
      while (i < buf.length && buf[i] !== d && buf[i] !== LF) {
        if (buf[i] === Q) return -1;
        i++;
      }
      if (i >= buf.length) return atEnd && fields + 1 === shape.columns ? records + 1 : records;
    }
    fields++;
    if (buf[i] === LF) {
      if (fields !== shape.columns) return -1;
      records++;
      fields = 0;
    }
    i++;
  }
  return records;
}

/**
 * The guessed record start of a slice cut at `at`: the byte after the first line end at or after
 * `at - 1` whose next records are plausible for `shape` (see plausibleRecords); with no shape
 * (JSON Lines, where a line end is always a record's), or none plausible in the window, the byte
 * after the first line end. The input's size when there is no line end.
 */
export async function guessRecordStart(path: string, at: number, shape: RecordShape | null = null): Promise<number> {
  if (at <= 0) return 0;
  const fh = await open(path, 'r').catch((err: unknown) => {
    throw systemError(err, path, 'reading an input');
  });
  try {
    const buf = Buffer.allocUnsafe(shape ? GUESS_WINDOW : 64 * 1024);
    for (let pos = at - 1; ; pos += buf.length) {
      const { bytesRead } = await fh.read(buf, 0, buf.length, pos);
      if (bytesRead === 0) return pos;
      const data = buf.subarray(0, bytesRead);
      const lf = data.indexOf(0x0a);
      if (lf < 0) continue;
      if (shape && shape.columns > 1) {
        for (let c = lf; c >= 0; c = data.indexOf(0x0a, c + 1)) {
          const n = plausibleRecords(data, c + 1, shape, PLAUSIBLE_RECORDS, bytesRead < buf.length);
          if (n > 0) return pos + c + 1; // PLAUSIBLE_RECORDS, or as many as the window holds
          if (n === 0) break; // not one whole record in the window: the first line end, as without a shape
        }
      }
      return pos + lf + 1;
    }
  } finally {
    await fh.close();
  }
}

/**
 * The records of one slice, in batches (each valid until the next is asked for). `schema`: the
 * input's, learned from its head, for a slice that does not begin at 0. `read` is filled in as
 * the slice is read; complete once the generator is done.
 */
export async function* readSlice(path: string, slice: InputSlice, ro: RecordReaderOptions, schema: InputSchema | null, read: SliceRead): AsyncGenerator<{ batch: RecordBatch; schema: InputSchema }> {
  const start = slice.start === 0 ? 0 : slice.exact ? slice.start : await guessRecordStart(path, slice.start, schema && schema.format !== 'jsonl' ? { delimiter: schema.delimiter, columns: schema.columns.length } : null);
  const cut = slice.end < 0 ? Infinity : slice.end;
  const reader = new RecordReader(ro);
  if (start > 0) {
    if (!schema) throw new Error('internal: a slice from the middle of an input needs its schema');
    reader.adoptSchema(schema);
    reader.resumeAt(start, 1);
  }
  read.start = start;
  read.end = start;
  read.lines = 0;
  read.records = 0;
  read.bytes = 0;
  let done = false;
  /** Records before the cut, and whether the first record start at or after it is known. */
  const take = (batch: RecordBatch | null): RecordBatch | null => {
    if (batch) {
      let n = batch.count;
      for (let i = 0; i < batch.count; i++) {
        if (batch.offset[i]! >= cut) {
          n = i;
          done = true;
          read.end = batch.offset[i]!;
          read.lines = batch.line[i]! - 1;
          break;
        }
      }
      read.records += n;
      if (n < batch.count) batch = { ...batch, count: n };
    }
    if (!done && reader.resumeOffset >= cut) {
      done = true;
      read.end = reader.resumeOffset;
      read.lines = reader.nextLine - 1;
    }
    return batch && batch.count > 0 ? batch : null;
  };
  if (start >= cut) {
    read.end = start;
    return;
  }
  const stream = createReadStream(path, { start, highWaterMark: 1 << 20 });
  try {
    let pos = start;
    outer: for await (const chunk of stream as AsyncIterable<Buffer>) {
      let from = 0;
      while (from < chunk.length) {
        // Before the cut: up to it. From there: a line at a time, until the end's record start is known.
        let to: number;
        if (pos + from < cut) to = Math.min(chunk.length, from + (cut - (pos + from)));
        else {
          const lf = chunk.indexOf(0x0a, from);
          to = lf < 0 ? chunk.length : lf + 1;
        }
        read.bytes += to - from;
        const batch = take(reader.push(chunk.subarray(from, to)));
        from = to;
        if (batch) yield { batch, schema: reader.schema! };
        if (done) break outer;
      }
      pos += chunk.length;
    }
    if (!done) {
      const batch = take(reader.end());
      if (batch) yield { batch, schema: reader.schema! };
      if (!done) {
        read.end = start + read.bytes;
        read.lines = reader.nextLine - 1;
      }
    }
    read.rejected = reader.stats.rejected;
  } finally {
    stream.destroy();
  }
}

/**
 * An input's schema (header, delimiter, line ending; JSON Lines: the first object's keys), from its
 * head: what a slice from the middle of it reads its records with.
 */
export async function headSchema(path: string, ro: RecordReaderOptions): Promise<InputSchema> {
  const reader = new RecordReader(ro);
  const stream = createReadStream(path, { highWaterMark: 1 << 16 });
  try {
    for await (const chunk of stream as AsyncIterable<Buffer>) {
      reader.push(chunk);
      if (reader.schema) return reader.schema;
    }
    reader.end();
  } finally {
    stream.destroy();
  }
  if (!reader.schema) throw new Error(`internal: ${path} has no schema`);
  return reader.schema;
}
