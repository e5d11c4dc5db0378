/**
 * Reading a byte range of a plain input as its own piece of work (a cluster's scatter task), so
 * that the records it yields are those a front-to-back read finds there.
 *
 * A slice [a, b) holds the records that start at or after its true first record start and before
 * the first record start at or after b (its end). Where a slice begins is guessed, unless known:
 * the byte after a line end at or after a − 1, by the rule of record-start.ts (for CSV and TSV,
 * the first line end whose next records read as whole records of the input's width). It can be
 * wrong; the read then reports the start it used, and whoever sees all the slices checks each
 * start against the end of the slice before (the same chain the worker threads' blocks keep,
 * io/blocks.ts) and reads a wrong slice again from the right start: a wrong guess costs time,
 * never bytes.
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
import { chunksInTurn } from './input.js';
import { systemError } from '../errors.js';
import { guessStart, shapeOf, type RecordShape } from './record-start.js';

/** Bytes read to find a slice's start. */
const GUESS_WINDOW = 1 << 20;

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
      const s = guessStart(data, 0, data.length, shape, bytesRead < buf.length);
      if (s >= 0) return pos + s;
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
  const start = slice.start === 0 ? 0 : slice.exact ? slice.start : await guessRecordStart(path, slice.start, schema && shapeOf(schema));
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
  const fh = await open(path, 'r').catch((err: unknown) => {
    throw systemError(err, path, 'reading an input');
  });
  try {
    let pos = start;
    outer: for await (const chunk of chunksInTurn(fh, path, start)) {
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
    await fh.close();
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
