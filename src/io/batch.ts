/**
 * What the record reader produces besides its batches: the input's format and schema, and the
 * records it refused. The batches themselves (RecordBatch, FieldKind) are the contract in
 * src/core/record-batch.ts, re-exported here for the readers' callers.
 */

export { FieldKind } from '../core/record-batch.js';
export type { RecordBatch } from '../core/record-batch.js';

export type InputFormat = 'csv' | 'tsv' | 'jsonl';
export type BadRecordPolicy = 'fail' | 'skip' | 'quarantine';

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
