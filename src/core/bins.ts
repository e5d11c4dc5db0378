/**
 * Quantile bins of `--stratify COL:bins=Q` as keys read them: the number of the bin a value falls
 * in, the bin's name in a stratum key, and a binned column's value read from a record. The edges
 * themselves are computed by engine/quantiles.ts, in a first pass over the inputs.
 */
import { RowdeckError, where } from '../errors.js';
import { FieldKind, fieldText, type RecordBatch } from './record-batch.js';

/** Number of the bin a value falls in. */
export function binOf(edges: ArrayLike<number>, v: number): number {
  let lo = 0;
  let hi = edges.length;
  while (lo < hi) {
    const m = (lo + hi) >>> 1;
    if (v >= edges[m]!) lo = m + 1;
    else hi = m;
  }
  return lo;
}

/** A readable, sortable label of bin k: "03 [12.5, 17.25)". */
export function binLabel(edges: ArrayLike<number>, k: number): string {
  const lo = k === 0 ? '-inf' : String(edges[k - 1]);
  const hi = k === edges.length ? '+inf' : String(edges[k]);
  return `${String(k + 1).padStart(2, '0')} [${lo}, ${hi})`;
}

/** Parses a bin column's text: null for missing, a number, or throws with file:line. */
export function parseBinValue(text: string | null, column: string, file: string, line: number): number | null {
  if (text === null || text.trim() === '') return null;
  const v = Number(text);
  if (!Number.isFinite(v)) {
    throw new RowdeckError(
      'RDK_NOT_NUMERIC',
      `${where(file, line)}: column "${column}" holds ${JSON.stringify(text.length > 40 ? text.slice(0, 40) + '…' : text)}, not a number; ${column}:bins=… needs numbers (or empty for missing). Stratify on it without :bins to treat it as classes.`,
      { file, line, column },
    );
  }
  return v;
}

/**
 * parseBinValue of wanted field w of record i: a plain field of printable ASCII (no space) is
 * read from its bytes without decoding them (its text is the same either way, so Number() sees
 * what it would), anything else, or a value that is not a number, as parseBinValue reads it.
 */
export function binValueAt(b: RecordBatch, i: number, w: number, column: string, file: string): number | null {
  const k = i * b.wanted + w;
  if (b.fieldKind[k] === FieldKind.Plain) {
    const s = b.fieldStart[k]!;
    const e = b.fieldEnd[k]!;
    if (s === e) return null;
    const d = b.data;
    let p = s;
    while (p < e && d[p]! > 0x20 && d[p]! < 0x7f) p++;
    if (p === e) {
      const v = Number(d.toString('latin1', s, e));
      if (Number.isFinite(v)) return v;
    }
  }
  return parseBinValue(fieldText(b, i, w), column, file, b.line[i]!);
}
