/**
 * The profile put together from what was read and merged: the class balance (every stratum,
 * and each stratify column's own classes), the warnings, the plan they were checked against.
 */
import type { Secret } from '../../core/hash.js';
import { compareStratumKeys, keyParts, stratumValues } from '../../core/strata.js';
import type { ResolvedProfileOptions } from '../../options.js';
import { VERSION } from '../../version.js';
import type { BinEdges } from '../quantiles.js';
import type { ReadCounts } from './read.js';
import { PROFILE_VERSION, type Profile, type ProfileStrata, type ProfileWarning } from './result.js';
import type { Statistics } from './statistics.js';
import { warnAboutColumns, warnAboutStrata } from './warnings.js';

/** What the profile took besides the counts: the bins, the secret of the default seed, and the times. */
export interface ProfileRun {
  binEdges: BinEdges[];
  secret: Secret;
  binsMs: number;
  readMs: number;
  /** When the profile began (its total time is taken here). */
  t0: number;
}

export function assembleProfile(o: ResolvedProfileOptions, read: ReadCounts, s: Statistics, run: ProfileRun): Profile {
  const { records, rejected, columns, keys, counts } = s;
  const warnings: ProfileWarning[] = [];
  let strata: ProfileStrata | null = null;
  if (o.stratify.length > 0) {
    strata = classBalance(o, keys, counts, records, run.binEdges);
    warnings.push(...warnAboutStrata(o, keys, counts, records, run.secret));
  }
  warnings.push(...warnAboutColumns(o, columns, run.binEdges, rejected));
  return {
    profileVersion: PROFILE_VERSION,
    tool: { name: 'rowdeck', version: VERSION },
    inputs: read.inputs,
    columnNames: read.columns,
    records,
    rejected,
    rejects: read.rejects,
    columns,
    strata,
    warnings,
    plan: { partitions: o.partitions, folds: o.folds, tolerance: o.tolerance },
    excludeValues: o.excludeValues,
    threads: o.threads,
    timingsMs: { bins: run.binsMs, read: run.readMs, total: Date.now() - run.t0 },
  };
}

/** Every stratum's records and share, and per stratify column its own classes (summed over the others). */
function classBalance(o: ResolvedProfileOptions, keys: string[], counts: number[], records: number, binEdges: BinEdges[]): ProfileStrata {
  const share = (n: number): number => (records > 0 ? n / records : 0);
  const byColumn = o.stratify.map((s, j) => {
    const marginal = new Map<string, number>();
    keys.forEach((k, i) => {
      const part = keyParts(k)[j]!;
      marginal.set(part, (marginal.get(part) ?? 0) + counts[i]!);
    });
    const parts = [...marginal.keys()].sort(compareStratumKeys);
    return {
      column: s.bins > 0 ? `${s.name}:bins=${s.bins}` : s.name,
      values: parts.map((p) => ({ value: o.excludeValues ? null : stratumValues(p), count: marginal.get(p)!, share: share(marginal.get(p)!) })),
    };
  });
  return {
    columns: o.stratify.map((s) => (s.bins > 0 ? `${s.name}:bins=${s.bins}` : s.name)),
    values: keys.map((k, i) => ({ value: o.excludeValues ? null : stratumValues(k), count: counts[i]!, share: share(counts[i]!) })),
    byColumn,
    bins: binEdges.map((b) => (o.excludeValues ? { ...b, edges: [] } : b)),
  };
}
