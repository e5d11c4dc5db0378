/**
 * The RecordBatch contract between the record reader and everything that consumes records, and
 * how one wanted field of a batch is read.
 *
 * A batch is a view over one buffer: records are byte ranges, and only the few fields a caller
 * asked for (the "wanted" columns) are located, as ranges too. Nothing is re-serialised, so a
 * record's bytes can be copied to an output exactly as they were read. The reader lives in
 * src/io; this contract lives here so that pure code (statistics, stratum keys) can read batches
 * without depending on how they were read.
 */

/** How a wanted field's bytes must be read. */
export const enum FieldKind {
  /** The range holds the value as is (CSV unquoted field, JSON number/boolean). */
  Plain = 0,
  /** CSV quoted field: the range includes the outer quotes; strip them and turn "" into ". */
  CsvQuoted = 1,
  /** JSON string token: the range includes the quotes; decode with JSON rules. */
  JsonString = 2,
  /** The field is absent (JSON key missing, or JSON null): a missing value. */
  Missing = 3,
}

export interface RecordBatch {
  /** Bytes that hold the records of this batch. Valid only until the reader is pushed again. */
  readonly data: Buffer;
  /** Number of records in the batch. */
  readonly count: number;
  /** Start of record i's content in `data`. */
  readonly start: Uint32Array;
  /** End (exclusive) of record i's content: its line terminator (LF or CRLF) is not included. */
  readonly end: Uint32Array;
  /** Offset just past record i's terminator; equals `end[i]` for a last record without one. */
  readonly next: Uint32Array;
  /** Byte offset of record i's first byte within its (decompressed) input. */
  readonly offset: Float64Array;
  /** Physical line number (1-based, as an editor shows it) on which record i starts. */
  readonly line: Float64Array;
  /** Number of wanted columns, W. Arrays below have `count * W` entries, record-major. */
  readonly wanted: number;
  /** Start of wanted field w of record i at index `i * W + w`, in `data`. */
  readonly fieldStart: Uint32Array;
  /** End (exclusive) of that field. */
  readonly fieldEnd: Uint32Array;
  /** How to read that field: a FieldKind. */
  readonly fieldKind: Uint8Array;
}

const QUOTE = 0x22;

/** Decodes a quoted CSV field whose range `[start, end)` includes the outer quotes. */
export function decodeCsvQuoted(buf: Buffer, start: number, end: number): string {
  const s = end - start >= 2 && buf[start] === QUOTE && buf[end - 1] === QUOTE ? buf.toString('utf8', start + 1, end - 1) : buf.toString('utf8', start, end);
  return s.includes('"') ? s.replaceAll('""', '"') : s;
}

/** The decoded text of wanted field `w` of record `i`: null when missing, '' for an empty CSV field. */
export function fieldText(batch: RecordBatch, i: number, w: number): string | null {
  const k = i * batch.wanted + w;
  const s = batch.fieldStart[k]!, e = batch.fieldEnd[k]!;
  switch (batch.fieldKind[k]) {
    case FieldKind.Missing:
      return null;
    case FieldKind.CsvQuoted:
      return decodeCsvQuoted(batch.data, s, e);
    case FieldKind.JsonString:
      return JSON.parse(batch.data.toString('utf8', s, e)) as string;
    default:
      return batch.data.toString('utf8', s, e);
  }
}
