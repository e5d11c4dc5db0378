/**
 * Strata: which class a record is in, and how a class is named. shuffle (its scatter stage),
 * profile and verify must agree on every part of it, so it is here once:
 *
 * - The stratum key: the canonical text of a record's stratify values. A column's part is the
 *   latin1 rendering of its value's decoded UTF-8 bytes (fieldKey), the name of its bin for
 *   COL:bins=Q (bins.ts), or MISSING_KEY; parts are joined by TUPLE_SEP. Keys of --key and
 *   --group values are built the same way (tupleKey). Keys compare as strings, and the manifest
 *   and the profile list strata in that order (compareStratumKeys).
 * - The byte-level fast path: where a field's bytes are its key as they stand (keyBytes), a table
 *   keyed by bytes (byte-table.ts) stands for the map of keys, with no string made per record.
 * - Names: a key's values (stratumValues, and back: keyOfValues), the label tables and charts
 *   show (stratumLabel), and the description every message uses (describeStratum).
 */
import { RowdeckError } from '../errors.js';
import { binLabel, binOf, binValueAt } from './bins.js';
import { BYTE_KEY_LIMIT } from './byte-table.js';
import { decodeLossless, encodeLossless } from './raw-text.js';
import { FieldKind, type RecordBatch } from './record-batch.js';

/** Key part of a missing value. Cannot collide with text: keys are latin1 renderings of UTF-8 bytes. */
export const MISSING_KEY = '\uffff';
/** Separator between the parts of a multi-column key (outside the latin1 range). */
export const TUPLE_SEP = '\u0100';
/** More strata than this is almost always a mistake (an ID column given to --stratify). */
export const MAX_STRATA = 100_000;

/** The error for more than MAX_STRATA strata, from shuffle and profile alike. */
export function tooManyStrata(columns: readonly string[]): RowdeckError {
  return new RowdeckError(
    'RDK_OPTION',
    `--stratify ${columns.join(',')} has more than ${MAX_STRATA} distinct values. Stratify on a class column; for a numeric column use NAME:bins=Q; to keep records of one entity together use --group.`,
    { column: columns.join(',') },
  );
}

/** Canonical text of one wanted field: the latin1 rendering of its decoded UTF-8 bytes. */
export function fieldKey(b: RecordBatch, i: number, w: number): string {
  const k = i * b.wanted + w;
  const s = b.fieldStart[k]!;
  const e = b.fieldEnd[k]!;
  switch (b.fieldKind[k]) {
    case FieldKind.Plain:
      return s === e ? MISSING_KEY : b.data.toString('latin1', s, e);
    case FieldKind.CsvQuoted:
      // The bytes between the quotes, doubled quotes undone, byte for byte (as decoding them as
      // UTF-8 and back did for valid text, without merging different invalid values).
      return e - s >= 2 && b.data[s] === 0x22 && b.data[e - 1] === 0x22 ? b.data.toString('latin1', s + 1, e - 1).replaceAll('""', '"') : b.data.toString('latin1', s, e).replaceAll('""', '"');
    case FieldKind.JsonString: {
      const v = JSON.parse(b.data.toString('utf8', s, e)) as string;
      return Buffer.from(v, 'utf8').toString('latin1');
    }
    default:
      return MISSING_KEY;
  }
}

/** Where keyBytes found a field's key bytes: `[start, end)` of the batch's data. */
export interface KeyRange {
  start: number;
  end: number;
}

/**
 * The byte-level fast path's contract. True when wanted field w of record i holds its key as it
 * stands, and then `range` says where: the latin1 text of those bytes is exactly fieldKey's. That
 * holds for a non-empty plain field, and for a quoted one (CSV, or a JSON string) whose content
 * is printable ASCII without a quote or backslash (nothing to decode, and no invalid UTF-8 that
 * decoding would replace). Only keys of up to BYTE_KEY_LIMIT bytes qualify (the byte table's).
 */
export function keyBytes(b: RecordBatch, i: number, w: number, range: KeyRange): boolean {
  const k = i * b.wanted + w;
  const kind = b.fieldKind[k];
  if (kind === FieldKind.Missing) return false;
  let s = b.fieldStart[k]!;
  let e = b.fieldEnd[k]!;
  if (kind !== FieldKind.Plain) {
    s++;
    e--;
    if (!plainAscii(b.data, s, e)) return false;
  }
  if (e <= s || e - s > BYTE_KEY_LIMIT) return false;
  range.start = s;
  range.end = e;
  return true;
}

/** True when `d[s, e)` holds only bytes 0x20-0x7E other than '"' and '\\' (and is short enough to look up by bytes). */
function plainAscii(d: Uint8Array, s: number, e: number): boolean {
  if (e - s > BYTE_KEY_LIMIT) return false;
  for (let i = s; i < e; i++) {
    const c = d[i]!;
    if (c < 0x20 || c > 0x7e || c === 0x22 || c === 0x5c) return false;
  }
  return true;
}

/** A stratify column as keys read it: its name (for messages) and its bin edges (null: its values are the classes). */
export interface KeyColumn {
  readonly name: string;
  readonly edges: ArrayLike<number> | null;
}

/**
 * One column's part of record i's stratum key, from wanted field w (-1: the input lacks the
 * column, a missing value). `file` names the input where a bin value is not a number.
 */
export function columnKey(b: RecordBatch, i: number, w: number, column: KeyColumn, file: string): string {
  if (w < 0) return MISSING_KEY;
  const edges = column.edges;
  if (edges === null) return fieldKey(b, i, w);
  const v = binValueAt(b, i, w, column.name, file);
  return v === null ? MISSING_KEY : binLabel(edges, binOf(edges, v));
}

/** Record i's stratum key: the parts of `columns` (columnKey), column j's from wanted field slots[j], joined by TUPLE_SEP. */
export function stratumKey(b: RecordBatch, i: number, slots: ArrayLike<number>, columns: readonly KeyColumn[], file: string): string {
  let k = '';
  for (let j = 0; j < columns.length; j++) k += (j > 0 ? TUPLE_SEP : '') + columnKey(b, i, slots[j]!, columns[j]!, file);
  return k;
}

/** The key of n wanted fields from slot `from` (--key or --group values): their fieldKeys joined by TUPLE_SEP. */
export function tupleKey(b: RecordBatch, i: number, from: number, n: number): string {
  let k = '';
  for (let w = 0; w < n; w++) k += (w > 0 ? TUPLE_SEP : '') + fieldKey(b, i, from + w);
  return k;
}

/** A key's parts, one per column. */
export function keyParts(key: string): string[] {
  return key.split(TUPLE_SEP);
}

/** The order strata are listed in (manifest, profile): their keys' code units. */
export function compareStratumKeys(a: string, b: string): number {
  return a < b ? -1 : a > b ? 1 : 0;
}

/** Place of keys[i] among `keys` in compareStratumKeys order (the index a list of strata shows it at). */
export function keyOrderIndex(keys: readonly string[], i: number): number {
  const key = keys[i]!;
  let n = 0;
  for (const k of keys) if (compareStratumKeys(k, key) < 0) n++;
  return n;
}

/**
 * Human form of a key: values decoded, missing shown as null. Bytes that are not UTF-8 stay
 * distinguishable (see raw-text.ts).
 */
export function stratumValues(key: string): (string | null)[] {
  return keyParts(key).map((v) => (v === MISSING_KEY ? null : decodeLossless(Buffer.from(v, 'latin1'))));
}

/** The key of a stratum's values (stratumValues, back). */
export function keyOfValues(values: readonly (string | null)[]): string {
  return values.map((x) => (x === null ? MISSING_KEY : encodeLossless(x).toString('latin1'))).join(TUPLE_SEP);
}

/** Columns' values as messages show them: `fault="stuck"`, `a="x", b=(missing)`. */
export function describeValues(columns: readonly string[], values: readonly (string | null | undefined)[]): string {
  return columns.map((c, i) => `${c}=${values[i] === null || values[i] === undefined ? '(missing)' : JSON.stringify(values[i])}`).join(', ');
}

/**
 * A stratum as every message names it: by its values (describeValues); `stratum #N` where the
 * values are withheld (--exclude-values), N its place in the list of strata (1-based, in key
 * order, as the manifest and the profile list them); `all records` without --stratify.
 */
export function describeStratum(columns: readonly string[], values: readonly (string | null | undefined)[] | null, index: number): string {
  if (values === null) return `stratum #${index + 1}`;
  if (columns.length === 0) return 'all records';
  return describeValues(columns, values);
}

/**
 * A stratum as tables and charts name it: its values joined by " · " ("(missing)" for a missing
 * one); `class N` where the values are withheld, N its place in the list (1-based); `all records`
 * without --stratify (no values).
 */
export function stratumLabel(values: readonly (string | null)[] | null, index: number): string {
  if (values === null) return `class ${index + 1}`;
  if (values.length === 0) return 'all records';
  return values.map((x) => (x === null ? '(missing)' : x)).join(' · ');
}
