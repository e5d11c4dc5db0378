// Test helpers: build CSV bytes while remembering where each field lies, then feed TableStats.
import { FieldKind } from '../src/io/batch.js';
import { TableStats } from '../src/core/stats.js';
import type { StatsOptions } from '../src/core/stats.js';

export interface FieldRef {
  start: number;
  end: number;
  kind: FieldKind;
}

export interface BuiltTable {
  data: Buffer;
  columns: string[];
  /** fields[record][column] */
  fields: FieldRef[][];
}

/** Quote a CSV field per RFC 4180 section 2 rules 5-7 (wrap in quotes, double inner quotes). */
function quoteCsv(v: string): string {
  return `"${v.replace(/"/g, '""')}"`;
}

/**
 * Builds CSV bytes (header + records, CRLF line ends) from rows of values. `null` becomes an empty
 * field. Fields that need it are quoted; others are quoted when `quoteSome` says so.
 */
export function buildCsvTable(columns: string[], rows: (string | null)[][], quoteSome: (r: number, c: number) => boolean = () => false): BuiltTable {
  const parts: Buffer[] = [];
  let pos = 0;
  const push = (s: string): [number, number] => {
    const b = Buffer.from(s, 'utf8');
    parts.push(b);
    const start = pos;
    pos += b.length;
    return [start, pos];
  };
  push(columns.join(',') + '\r\n');
  const fields: FieldRef[][] = [];
  rows.forEach((row, r) => {
    const refs: FieldRef[] = [];
    row.forEach((v, c) => {
      if (c > 0) push(',');
      const value = v ?? '';
      const mustQuote = /[",\r\n]/.test(value);
      const quoted = mustQuote || (v !== null && quoteSome(r, c));
      const [start, end] = push(quoted ? quoteCsv(value) : value);
      refs.push({ start, end, kind: quoted ? FieldKind.CsvQuoted : FieldKind.Plain });
    });
    push('\r\n');
    fields.push(refs);
  });
  return { data: Buffer.concat(parts), columns, fields };
}

/** Feeds the given records (all when omitted) of a built table into a new TableStats. */
export function computeTableStats(t: BuiltTable, opts?: StatsOptions, records?: number[]): TableStats {
  const stats = new TableStats(t.columns, opts);
  const ids = records ?? t.fields.map((_, i) => i);
  for (const r of ids) {
    const row = t.fields[r]!;
    row.forEach((f, c) => stats.addField(c, t.data, f.start, f.end, f.kind));
    stats.addRecordDone();
  }
  return stats;
}

/** Fisher-Yates with a supplied uniform generator. */
export function shuffleInPlace<T>(a: T[], rng: () => number): T[] {
  for (let i = a.length - 1; i > 0; i--) {
    const j = Math.floor(rng() * (i + 1));
    [a[i], a[j]] = [a[j]!, a[i]!];
  }
  return a;
}
