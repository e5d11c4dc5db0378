/**
 * Helpers about fields and columns that sit outside the parsing loops: the fields of one CSV/TSV
 * record already accepted (the header, tests), and the errors about an input's columns and
 * records (a column that is not there, named with the closest one; a header with no records).
 * Reading one wanted field of a batch is part of the batch contract (core/record-batch.ts).
 */

import { FieldKind } from '../core/record-batch.js';
import { RowdeckError } from '../errors.js';
import type { InputFormat } from './batch.js';

const QUOTE = 0x22;

/**
 * Locates every field of one CSV/TSV record's content `[start, end)` (no line terminator),
 * quote-aware, and returns the number of fields. Field f's range is written to
 * `outStart[f]`/`outEnd[f]` with its kind in `outKind[f]` (Plain, or CsvQuoted where the range
 * includes the outer quotes). Fields beyond the arrays' length are counted but not written,
 * so a caller can size its arrays from the return value and call again.
 *
 * Meant for records the reader has already accepted; on malformed bytes (text after a closing
 * quote) the field simply runs on to the next delimiter.
 */
export function splitRecordFields(
  data: Buffer,
  start: number,
  end: number,
  delimiter: number,
  outStart: Uint32Array,
  outEnd: Uint32Array,
  outKind: Uint8Array,
): number {
  const cap = Math.min(outStart.length, outEnd.length, outKind.length);
  let f = 0;
  let i = start;
  for (;;) {
    const fs = i;
    let kind: number = FieldKind.Plain;
    if (i < end && data[i] === QUOTE) {
      kind = FieldKind.CsvQuoted;
      i++;
      // Inside quotes: a doubled quote is data, a single one closes the field.
      while (i < end) {
        if (data[i] === QUOTE) {
          if (i + 1 < end && data[i + 1] === QUOTE) i += 2;
          else {
            i++;
            break;
          }
        } else i++;
      }
    }
    while (i < end && data[i] !== delimiter) i++;
    if (f < cap) {
      outStart[f] = fs;
      outEnd[f] = i;
      outKind[f] = kind;
    }
    f++;
    if (i >= end) return f;
    i++; // past the delimiter; a delimiter as last byte leaves one more (empty) field
  }
}


export function checkNotHeaderOnly(opts: { format: InputFormat; header: boolean; file: string }, seen: number): void {
  if (seen === 0 && opts.format !== 'jsonl' && opts.header) {
    const { file } = opts;
    throw new RowdeckError('RDK_HEADER_ONLY', `${file}: the input has a header but no records. Check that the file was fully written, or drop it from the inputs.`, { file, line: 1 });
  }
}


/** RDK_UNKNOWN_COLUMN naming the closest column by edit distance and listing all of them. */
export function unknownColumn(name: string, columns: string[], file: string): RowdeckError {
  let best = '';
  let bestD = Infinity;
  for (const c of columns) {
    const dist = measureEditDistance(name.toLowerCase(), c.toLowerCase());
    if (dist < bestD) { bestD = dist; best = c; }
  }
  const hint = columns.length > 0 ? ` Did you mean "${best}"?` : '';
  const list = columns.length > 40 ? `${columns.slice(0, 40).join(', ')}, … (${columns.length} in all)` : columns.join(', ');
  return new RowdeckError('RDK_UNKNOWN_COLUMN', `${file}: no column named "${name}".${hint} Columns: ${list}.`, { file, column: name, suggestion: best, columns });
}

/** Levenshtein distance. */
export function measureEditDistance(a: string, b: string): number {
  let prev = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i++) {
    const cur = [i];
    for (let j = 1; j <= b.length; j++) {
      cur[j] = Math.min(prev[j]! + 1, cur[j - 1]! + 1, prev[j - 1]! + (a[i - 1] === b[j - 1] ? 0 : 1));
    }
    prev = cur;
  }
  return prev[b.length]!;
}
