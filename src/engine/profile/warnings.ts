/**
 * The profile's warnings: classes too small for the planned partitions or folds, the deviation
 * a shuffle with the default seed would reach (from the same dealing tables, with settings that
 * would work), missing values in a stratify column, identifier-like columns, empty and
 * single-valued columns, approximate bins and rejected records.
 */
import { dealBalance, orderStrata, withinTolerance } from '../../core/balance.js';
import { buildDealTable, countCells, seededStarts, type DealSpec } from '../../core/deal.js';
import type { Secret } from '../../core/hash.js';
import type { ColumnSummary } from '../../core/stats.js';
import { describeStratum, keyParts, MISSING_KEY, stratumValues } from '../../core/strata.js';
import type { ResolvedProfileOptions } from '../../options.js';
import type { BinEdges } from '../quantiles.js';
import type { ProfileWarning } from './result.js';

/** Classes listed one by one in warnings; the rest are summed up. */
const MAX_LISTED_CLASSES = 10;
/** More classes than this in a stratify column reads like an identifier, not a class. */
const MANY_CLASSES = 1000;

/** A class as messages name it (core/strata.ts); `index`: its place in strata.values, key order. */
function describeClass(o: ResolvedProfileOptions, key: string, index: number): string {
  return describeStratum(o.stratify.map((s) => s.name), o.excludeValues ? null : stratumValues(key), index);
}

/**
 * The largest deviation a shuffle with the default seed would reach, over parts and folds, for
 * `partitions` x `folds` (the same quotas and dealing order shuffle computes).
 */
export function predictDeviation(keys: string[], counts: number[], partitions: number, folds: number, secret: Secret): { deviation: number; stratum: number; kind: 'part' | 'fold' } {
  const order = orderStrata(keys, secret);
  const sizes = order.map((i) => counts[i]!);
  const deal: DealSpec = { splits: [{ name: '', weight: 1 }], exactCounts: false, partitions, folds };
  const table = buildDealTable(sizes, deal, seededStarts(secret, 1));
  const worst = dealBalance(countCells(table), sizes, { splits: 1, partitions, folds }, 'by-stratum');
  return { deviation: worst.deviation, stratum: worst.stratum < 0 ? -1 : order[worst.stratum]!, kind: worst.kind };
}

/** Largest n in [lo, from] (searching downwards, at most `tries` values) for which ok(n) holds, or null. */
function findLargest(from: number, lo: number, ok: (n: number) => boolean, tries = 200): number | null {
  for (let n = from, k = 0; n >= lo && k < tries; n--, k++) if (ok(n)) return n;
  return null;
}

export function warnAboutStrata(o: ResolvedProfileOptions, keys: string[], counts: number[], records: number, secret: Secret): ProfileWarning[] {
  const out: ProfileWarning[] = [];
  const columnsText = o.stratify.map((s) => s.name).join(',');
  const listSmall = (limit: number, code: 'CLASS_BELOW_PARTITIONS' | 'CLASS_BELOW_FOLDS', what: string): void => {
    const small = keys.map((k, i) => i).filter((i) => counts[i]! < limit);
    small.slice(0, MAX_LISTED_CLASSES).forEach((i) => {
      out.push({
        code,
        column: columnsText,
        message: `${describeClass(o, keys[i]!, i)} has ${counts[i]} record${counts[i] === 1 ? '' : 's'}, fewer than the ${limit} ${what}: some ${what} get none of it.`,
        details: { class: o.excludeValues ? i + 1 : keys[i]!, count: counts[i]!, [what]: limit },
      });
    });
    if (small.length > MAX_LISTED_CLASSES) {
      out.push({
        code,
        column: columnsText,
        message: `… and ${small.length - MAX_LISTED_CLASSES} more class(es) with fewer than ${limit} records.`,
        details: { classes: small.length - MAX_LISTED_CLASSES, [what]: limit },
      });
    }
  };
  if (o.partitions > 1) listSmall(o.partitions, 'CLASS_BELOW_PARTITIONS', 'partitions');
  if (o.folds > 1) listSmall(o.folds, 'CLASS_BELOW_FOLDS', 'folds');

  // What a shuffle would reach, and what would work instead. Skipped when the tables get large.
  const P = o.partitions;
  const K = o.folds;
  if ((P > 1 || K > 1) && keys.length * P * K <= 5_000_000) {
    const worst = predictDeviation(keys, counts, P, K, secret);
    if (!withinTolerance(worst.deviation, o.tolerance)) {
      const budget = keys.length * K * P;
      const fits = (p: number, k: number): boolean => withinTolerance(predictDeviation(keys, counts, p, k, secret).deviation, o.tolerance);
      const tries = Math.max(1, Math.min(200, Math.floor(20_000_000 / Math.max(1, budget))));
      const partitions = P > 1 ? findLargest(P - 1, 1, (p) => fits(p, K), tries) : null;
      const folds = K > 1 ? findLargest(K - 1, 2, (k) => fits(P, k), tries) : null;
      const tolerance = Math.ceil(worst.deviation * 100) / 100;
      const hints: string[] = [];
      if (partitions !== null && P > 1) hints.push(`--partitions ${partitions}`);
      if (folds !== null && K > 1) hints.push(`--folds ${folds}`);
      hints.push(`--tolerance ${tolerance}`);
      const planned = [P > 1 ? `--partitions ${P}` : '', K > 1 ? `--folds ${K}` : ''].filter(Boolean).join(' ');
      const who = worst.stratum >= 0 ? describeClass(o, keys[worst.stratum]!, worst.stratum) : 'a class';
      out.push({
        code: 'TOLERANCE_UNMET',
        column: columnsText,
        message:
          `With ${planned}, a shuffle would miss the share of ${who} (${counts[worst.stratum] ?? 0} of ${records} records) by ${(worst.deviation * 100).toFixed(1)}% in some ${worst.kind}, ` +
          `more than the tolerance ${o.tolerance}, and stop. Would work: ${hints.join(', or ')}` +
          (o.stratify.length > 0 ? ', or merging rare classes into one.' : '.'),
        details: { deviation: worst.deviation, tolerance: o.tolerance, partitions, folds, toleranceNeeded: tolerance },
      });
    }
  }

  // Missing values form their own class; often that is a surprise.
  o.stratify.forEach((s, j) => {
    let missing = 0;
    keys.forEach((k, i) => {
      if (keyParts(k)[j] === MISSING_KEY) missing += counts[i]!;
    });
    if (missing > 0) {
      out.push({
        code: 'STRATIFY_MISSING',
        column: s.name,
        message: `${s.name} is missing in ${missing} record${missing === 1 ? '' : 's'} (${((missing / Math.max(1, records)) * 100).toFixed(1)}%); a shuffle deals them as a class of their own.`,
        details: { missing },
      });
    }
  });
  if (keys.length > MANY_CLASSES) {
    out.push({
      code: 'MANY_CLASSES',
      column: columnsText,
      message: `--stratify ${columnsText} makes ${keys.length} classes; is it an identifier? Stratify on a class column, use NAME:bins=Q for a numeric one, or --group to keep an entity's records together.`,
      details: { classes: keys.length },
    });
  }
  return out;
}

export function warnAboutColumns(o: ResolvedProfileOptions, columns: ColumnSummary[], bins: BinEdges[], rejected: number): ProfileWarning[] {
  const out: ProfileWarning[] = [];
  for (const c of columns) {
    if (c.type === 'empty') {
      out.push({ code: 'COLUMN_EMPTY', column: c.name, message: `${c.name} has no values at all (${c.missing} missing).`, details: { missing: c.missing } });
    } else if (c.distinct === 1 && !c.approximate) {
      out.push({ code: 'SINGLE_VALUE', column: c.name, message: `${c.name} holds one value only${c.missing > 0 ? ` (and ${c.missing} missing)` : ''}.`, details: { count: c.count, missing: c.missing } });
    }
  }
  for (const b of bins) {
    if (!b.exact) {
      out.push({
        code: 'BINS_APPROXIMATE',
        column: b.column,
        message: `${b.column}: too many values to hold for exact quantiles; the bin edges come from a uniform sample of them.`,
        details: { values: b.values },
      });
    }
  }
  if (rejected > 0) {
    out.push({ code: 'REJECTED_RECORDS', column: null, message: `${rejected} record${rejected === 1 ? ' was' : 's were'} malformed and left out (--on-bad-record skip).`, details: { rejected } });
  }
  return out;
}
