/**
 * The threads' counts merged: column statistics (exact, in any order: core/stats.ts) and the
 * records of each stratum (sums), so the profile does not depend on the thread count or on
 * which thread saw which batch.
 */
import { TableStats, type ColumnSummary } from '../../core/stats.js';
import { compareStratumKeys, MAX_STRATA, tooManyStrata } from '../../core/strata.js';
import type { ResolvedProfileOptions } from '../../options.js';
import type { ReadCounts } from './read.js';

/** The whole input's figures. */
export interface Statistics {
  records: number;
  rejected: number;
  columns: ColumnSummary[];
  /** Stratum keys in key order (empty without --stratify), and their records. */
  keys: string[];
  counts: number[];
}

export function mergeStatistics(o: ResolvedProfileOptions, read: ReadCounts): Statistics {
  // The first thread's tables are turned back into a table, and the others merged into it from
  // their serialised form: a wide input's tables are large.
  let stats: TableStats | null = null;
  for (const r of read.results) {
    if (stats === null) stats = TableStats.fromJSON(r.stats);
    else stats.mergeSerialized(r.stats);
  }
  stats ??= new TableStats(read.columns);
  const records = read.inputs.reduce((a, x) => a + x.records, 0);
  const rejected = read.inputs.reduce((a, x) => a + x.rejected, 0);
  const columns = stats.summary({ excludeValues: o.excludeValues });
  let keys: string[] = [];
  let counts: number[] = [];
  if (o.stratify.length > 0) {
    const merged = new Map<string, number>();
    for (const r of read.results) for (const [k, n] of r.strata) merged.set(k, (merged.get(k) ?? 0) + n);
    if (merged.size > MAX_STRATA) throw tooManyStrata(o.stratify.map((s) => s.name));
    keys = [...merged.keys()].sort(compareStratumKeys);
    counts = keys.map((k) => merged.get(k)!);
  }
  return { records, rejected, columns, keys, counts };
}
