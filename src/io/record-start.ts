/**
 * Where a record starts, seen from an arbitrary byte of a CSV, TSV or JSON Lines input: the one
 * rule both a cluster's slices (slices.ts) and the worker threads' blocks (blocks.ts) guess by.
 * The guess is the byte after a line end; for CSV and TSV, the first line end whose next records
 * read as whole records of the input's width outside quotes, since a line end inside a quoted
 * field is followed by the rest of that field, which rarely does. A guess is only ever a guess:
 * its reader checks it against the end of the piece before and parses again from there when it
 * was wrong, so a wrong guess costs time, never bytes.
 */

import type { InputSchema } from './batch.js';

/** What a record of the input looks like, for telling a record start from a line end inside quotes. */
export interface RecordShape {
  delimiter: number;
  columns: number;
}

/** Records a candidate start must begin with (fewer when the window ends first). */
const PLAUSIBLE_RECORDS = 4;
/**
 * Candidates lie within this many bytes of the first line end: where no line end there is
 * plausible (bare quotes in a TSV, ragged rows), the guess falls back to the first line end
 * after reading a little, not a whole block's worth of candidates.
 */
const CANDIDATE_SPAN = 64 * 1024;

/** The shape of an input's records, or null where every line end is a record's (JSON Lines). */
export function shapeOf(schema: InputSchema): RecordShape | null {
  return schema.format === 'jsonl' ? null : { delimiter: schema.delimiter, columns: schema.columns.length };
}

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
 * The guessed record start in `d[from, end)` (an index into `d`), or -1 when no line end is
 * there: the byte after the first line end whose next records are plausible for `shape` (see
 * plausibleRecords); with no shape (JSON Lines, where a line end is always a record's, or one
 * column), or none plausible, or not one whole record in the window, the byte after the first
 * line end. Candidates lie before `end` and within CANDIDATE_SPAN of the first; the records after them are read up to `windowEnd`
 * (a block's lookahead), and `atEnd` says the input ends there.
 */
export function guessStart(d: Uint8Array, from: number, end: number, shape: RecordShape | null, atEnd: boolean, windowEnd = end): number {
  const lf = d.indexOf(0x0a, from);
  if (lf < 0 || lf >= end) return -1;
  if (shape && shape.columns > 1) {
    const window = d.subarray(0, windowEnd);
    const last = Math.min(end, lf + CANDIDATE_SPAN);
    for (let c = lf; c >= 0 && c < last; c = d.indexOf(0x0a, c + 1)) {
      const n = plausibleRecords(window, c + 1, shape, PLAUSIBLE_RECORDS, atEnd);
      if (n > 0) return c + 1; // PLAUSIBLE_RECORDS, or as many as the window holds
      if (n === 0) break; // not one whole record in the window: the first line end, as without a shape
    }
  }
  return lf + 1;
}
