/** Test helpers: feed a whole input to a RecordReader in chunks and collect plain results. */
import { RecordReader } from '../src/io/reader.js';
import { fieldText } from '../src/core/record-batch.js';
import type { RecordReaderOptions } from '../src/io/reader.js';
import type { RecordBatch, RejectedRecord } from '../src/io/batch.js';

export interface ReadResult {
  /** Raw record content (no terminator), as latin1-safe Buffers turned into strings (utf8). */
  records: string[];
  /** Wanted field values per record (decoded). */
  fields: (string | null)[][];
  lines: number[];
  offsets: number[];
  /** Raw record bytes including the terminator (from start to next). */
  raw: Buffer[];
  rejected: RejectedRecord[];
  reader: RecordReader;
}

export function collect(batch: RecordBatch | null, out: ReadResult): void {
  if (!batch) return;
  for (let i = 0; i < batch.count; i++) {
    out.records.push(batch.data.toString('utf8', batch.start[i], batch.end[i]));
    out.raw.push(Buffer.from(batch.data.subarray(batch.start[i], batch.next[i])));
    out.lines.push(batch.line[i]!);
    out.offsets.push(batch.offset[i]!);
    const f: (string | null)[] = [];
    for (let w = 0; w < batch.wanted; w++) f.push(fieldText(batch, i, w));
    out.fields.push(f);
  }
}

/** Reads `input` cut into pieces of `chunk` bytes (or at the given cut points). */
export function readAll(input: Buffer | string, opts: Partial<RecordReaderOptions> = {}, chunk: number | number[] = 1 << 20): ReadResult {
  const buf = typeof input === 'string' ? Buffer.from(input, 'utf8') : input;
  const out: ReadResult = { records: [], fields: [], lines: [], offsets: [], raw: [], rejected: [], reader: undefined as unknown as RecordReader };
  const reader = new RecordReader({
    format: 'csv',
    header: true,
    wanted: [],
    file: 'data.csv',
    onBadRecord: 'fail',
    onReject: (r) => out.rejected.push(r),
    ...opts,
  });
  out.reader = reader;
  const cuts = typeof chunk === 'number' ? [] : [...chunk].sort((a, b) => a - b);
  if (typeof chunk === 'number') for (let p = chunk; p < buf.length; p += chunk) cuts.push(p);
  let prev = 0;
  for (const c of [...cuts, buf.length]) {
    if (c <= prev && c !== buf.length) continue;
    // Copy each piece: the reader must not rely on the caller keeping old chunks alive.
    collect(reader.push(Buffer.from(buf.subarray(prev, c))), out);
    prev = c;
  }
  collect(reader.end(), out);
  return out;
}

/** Like readAll but returns the thrown error (or fails the caller's expectation if none). */
export function readError(input: Buffer | string, opts: Partial<RecordReaderOptions> = {}, chunk: number | number[] = 1 << 20): { code: string; message: string; details: Record<string, unknown> } {
  try {
    readAll(input, opts, chunk);
  } catch (err) {
    const e = err as { code: string; message: string; details: Record<string, unknown> };
    return { code: e.code, message: e.message, details: e.details };
  }
  throw new Error('expected the reader to throw');
}
