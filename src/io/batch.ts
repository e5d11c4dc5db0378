/**
 * The contract between the record reader and everything that consumes records.
 *
 * A batch is a view over one buffer: records are byte ranges, and only the few fields a caller
 * asked for (the "wanted" columns) are located, as ranges too. Nothing is re-serialised, so a
 * record's bytes can be copied to an output exactly as they were read.
 */

export type InputFormat = 'csv' | 'tsv' | 'jsonl';
export type BadRecordPolicy = 'fail' | 'skip' | 'quarantine';

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

/** What the reader learned from the header (CSV/TSV) or the first record (JSON Lines). */
export interface InputSchema {
  format: InputFormat;
  /** Column names: the header's, generated `column_1…` with no header, or the first object's keys. */
  columns: string[];
  /** Header record's exact bytes, without its line terminator; null for JSON Lines or no header. */
  headerBytes: Buffer | null;
  /** Line terminator seen first in the input; used for a last record that has none. */
  lineEnding: '\n' | '\r\n';
  /** Field delimiter byte (CSV/TSV). */
  delimiter: number;
}

/** A record the reader refused under `--on-bad-record skip|quarantine`. */
export interface RejectedRecord {
  file: string;
  line: number;
  code: string;
  reason: string;
  /** The record's raw bytes (content only); may be cut for very long records. */
  bytes: Buffer;
}
