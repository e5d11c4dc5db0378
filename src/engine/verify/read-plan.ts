/**
 * ReadPlan: what the manifest says about reading the parts and the inputs (format, header,
 * columns) and about recognising each record's class and fold, made once from the manifest.
 */
import type { InputFormat } from '../../io/batch.js';
import type { PartOrder } from '../../options.js';
import { describeStratum, keyOfValues } from '../../core/strata.js';
import type { Manifest } from '../manifest.js';

/** How to read the parts and inputs, and how to recognise each record's class, from the manifest. */
export interface ReadPlan {
  format: InputFormat;
  delimiter: string | undefined;
  delimiterByte: number;
  header: boolean;
  columns: string[];
  stratify: string[];
  /** Per stratify column: quantile bin edges, or null for plain values. */
  bins: (number[] | null)[];
  /** Canonical stratum key -> index in `strata.values`; null when the values were left out. */
  strataIndex: Map<string, number> | null;
  strataCount: number;
  strataLabels: string[];
  folds: number;
  foldColumn: string | null;
  /** The columns whose statistics the manifest holds (a run with --stats), or null. */
  statsColumns: string[] | null;
  /** Whether those statistics were written without data values. */
  excludeValues: boolean;
  /** The order the manifest promises inside each part ("interleaved": dealing scheme 1's, not checked). */
  order: PartOrder | 'interleaved';
  /** `grouped`: the columns whose values make a group (the group column, or the key columns). */
  groupColumns: string[];
}

export function createReadPlan(m: Manifest): ReadPlan {
  const o = m.options as { format: InputFormat; delimiter: string | null; header: boolean; stratify: string[]; folds: number };
  const columns = m.strata.columns;
  const bins = columns.map((c, w) => {
    // "COL:bins=Q" in the options marks a binned column; its edges are in strata.bins.
    if (o.stratify[w] === c) return null;
    return m.strata.bins.find((b) => b.column === c)?.edges ?? null;
  });
  const withheld = columns.length > 0 && m.strata.values.some((v) => v.value === null);
  let strataIndex: Map<string, number> | null = null;
  if (!withheld) {
    strataIndex = new Map();
    m.strata.values.forEach((v, i) => {
      const key = keyOfValues(v.value ?? []);
      strataIndex!.set(key, i);
    });
  }
  const delimiter = o.delimiter ?? undefined;
  return {
    format: o.format,
    delimiter,
    delimiterByte: (delimiter ?? (o.format === 'tsv' ? '\t' : ',')).charCodeAt(0),
    header: o.header,
    columns: m.input.columns,
    stratify: columns,
    bins,
    strataIndex,
    strataCount: m.strata.values.length,
    strataLabels: m.strata.values.map((v, i) => describeStratum(columns, withheld ? null : v.value, i)),
    folds: Math.max(1, o.folds),
    foldColumn: m.output.foldColumn,
    statsColumns: m.input.stats !== undefined ? m.input.columns : null,
    excludeValues: (m.options as { excludeValues?: boolean }).excludeValues === true,
    order: m.dealingScheme === undefined ? 'interleaved' : (m.options as { order: PartOrder }).order,
    groupColumns: m.options.group !== null ? [m.options.group as string] : (m.options.key as string[]),
  };
}

