/**
 * Record reader: a push parser over Buffers that turns CSV/TSV/JSON Lines bytes into record
 * batches (byte ranges, see batch.ts). No fs or stream imports here; src/io/input.ts adapts files.
 */

import { FieldKind } from './batch.js';

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

/** Decodes a quoted CSV field whose range `[start, end)` includes the outer quotes. */
export function decodeCsvQuoted(buf: Buffer, start: number, end: number): string {
  const s = end - start >= 2 && buf[start] === QUOTE && buf[end - 1] === QUOTE ? buf.toString('utf8', start + 1, end - 1) : buf.toString('utf8', start, end);
  return s.includes('"') ? s.replaceAll('""', '"') : s;
}
