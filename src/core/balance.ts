/**
 * Class balance: the seeded order strata are dealt in, the greedy placement of whole groups,
 * and the measure the tolerance promise is checked with. Pure.
 *
 * The measure is the one balance report of shuffle (the tolerance check before anything is
 * written), verify (the balance recomputed from the parts) and profile (what a shuffle would
 * reach): a class's share in a unit against its share in the whole (signedDeviation), its
 * largest size over units (maxDeviation), over parts and over each split's folds together
 * (balanceOfUnits; dealBalance from a deal's cells), checked against the tolerance with one
 * slack for rounding (withinTolerance).
 */
import type { GroupTable } from './group-table.js';
import { hashBytes, type Secret } from './hash.js';

/**
 * Orders strata by a keyed hash of their key (ties by the key itself), so the dealing order is
 * seeded but does not depend on the order in which strata were first seen.
 */
export function orderStrata(keys: string[], secret: Secret): number[] {
  const h = keys.map((k) => {
    const b = Buffer.from(k, 'latin1');
    const x = hashBytes(secret, b, 0, b.length);
    return [x[0]!, x[1]!] as const;
  });
  return keys
    .map((_, i) => i)
    .sort((a, b) => h[a]![0] - h[b]![0] || h[a]![1] - h[b]![1] || (keys[a]! < keys[b]! ? -1 : keys[a]! > keys[b]! ? 1 : 0));
}

/**
 * Places groups as units into cells. Largest groups first (ties by key, which is seeded); each
 * goes to the cell whose class histogram is furthest behind its target for the group's classes,
 * weighing the cell's total size too. Returns the cell of each group, by group index.
 *
 * `groups` holds dealing stratum ids, its groups in key order; `cellWeight[c]` is the fraction
 * of all records cell c should receive. A group's classes are added in increasing order of id
 * (GroupTable.strataOf), so the scores do not depend on the order in which records were read.
 */
export function placeGroups(groups: GroupTable, strataSizes: ArrayLike<number>, cellWeight: number[]): Uint32Array {
  const C = cellWeight.length;
  const nStrata = strataSizes.length;
  const total = Array.from(strataSizes).reduce((a, b) => a + b, 0);
  const have = new Float64Array(C * nStrata);
  const haveTotal = new Float64Array(C);
  const n = groups.count;
  const { lo, records, first } = groups;
  const order = bySizeThenKey(records, n);
  const out = new Uint32Array(n);
  for (let k = 0; k < n; k++) {
    const gi = order[k]!;
    const size = records[gi]!;
    // Most groups are of one class: no list to make for them.
    const several = groups.extra.has(gi) ? groups.strataOf(gi) : null;
    const one = first[gi]!;
    let best = -1;
    let bestScore = -Infinity;
    // Cells from a seeded start, so ties do not all go to cell 0 (no modulo in the loop).
    let c = lo[gi]! % C;
    for (let j = 0; j < C; j++, c = c === C - 1 ? 0 : c + 1) {
      const w = cellWeight[c]!;
      if (w === 0) continue;
      // Deficit, in units of "records this cell should still get", per class of the group,
      // normalised by the class size so rare classes count as much as common ones.
      let score = 0;
      if (several) {
        for (const [s, m] of several) score += (m * (w * strataSizes[s]! - have[c * nStrata + s]!)) / strataSizes[s]!;
      } else score += (size * (w * strataSizes[one]! - have[c * nStrata + one]!)) / strataSizes[one]!;
      score += (size * (w * total - haveTotal[c]!)) / total;
      if (score > bestScore) {
        bestScore = score;
        best = c;
      }
    }
    out[gi] = best;
    if (several) for (const [s, m] of several) have[best * nStrata + s]! += m;
    else have[best * nStrata + one]! += size;
    haveTotal[best]! += size;
  }
  return out;
}

/**
 * Group indices by size, largest first, and by index (key order) among equal sizes: one stable
 * counting pass over the sizes' places. A comparison sort of 10 M groups took seconds; there are
 * few distinct sizes.
 */
function bySizeThenKey(records: Float64Array, n: number): Uint32Array {
  // Places counted from the largest size down: sizes index an array where they are not far
  // beyond the group count, a Map of the distinct ones otherwise.
  let largest = 0;
  for (let i = 0; i < n; i++) if (records[i]! > largest) largest = records[i]!;
  const dense = largest <= 4 * n + 1024 ? new Float64Array(largest + 1) : null;
  const sparse = dense ? null : new Map<number, number>();
  for (let i = 0; i < n; i++) {
    if (dense) dense[records[i]!]!++;
    else sparse!.set(records[i]!, (sparse!.get(records[i]!) ?? 0) + 1);
  }
  let sum = 0;
  if (dense) {
    for (let size = largest; size >= 0; size--) {
      const c = dense[size]!;
      dense[size] = sum;
      sum += c;
    }
  } else {
    for (const size of [...sparse!.keys()].sort((a, b) => b - a)) {
      const c = sparse!.get(size)!;
      sparse!.set(size, sum);
      sum += c;
    }
  }
  const order = new Uint32Array(n);
  for (let g = 0; g < n; g++) {
    const size = records[g]!;
    if (dense) order[dense[size]!++] = g;
    else {
      const p = sparse!.get(size)!;
      sparse!.set(size, p + 1);
      order[p] = g;
    }
  }
  return order;
}

/**
 * Signed relative deviation of a class's share in a unit from its share in the whole:
 * (n/unitRecords − classRecords/total) / (classRecords/total); 0 for an empty unit or class.
 */
export function signedDeviation(n: number, unitRecords: number, classRecords: number, total: number): number {
  if (unitRecords <= 0 || classRecords <= 0 || total <= 0) return 0;
  const overall = classRecords / total;
  return (n / unitRecords - overall) / overall;
}

/** A largest deviation and where it is: unit (part, or fold unit) and stratum; -1 where there is none. */
export interface Deviation {
  deviation: number;
  unit: number;
  stratum: number;
}

/**
 * Largest relative deviation of a stratum's share in a unit (a part, or a fold) from its share
 * in the whole: max over units u and strata s of |signedDeviation|, N(s) the strata's sizes.
 * `counts[u * strata + s]`. Units with no records are skipped. Returns the worst case too.
 */
export function maxDeviation(counts: ArrayLike<number>, units: number, strataSizes: ArrayLike<number>): Deviation {
  const nStrata = strataSizes.length;
  let total = 0;
  for (let s = 0; s < nStrata; s++) total += strataSizes[s]!;
  let worst: Deviation = { deviation: 0, unit: -1, stratum: -1 };
  for (let u = 0; u < units; u++) {
    let nu = 0;
    for (let s = 0; s < nStrata; s++) nu += counts[u * nStrata + s]!;
    if (nu === 0) continue;
    for (let s = 0; s < nStrata; s++) {
      const dev = Math.abs(signedDeviation(counts[u * nStrata + s]!, nu, strataSizes[s]!, total));
      if (dev > worst.deviation + 1e-15) worst = { deviation: dev, unit: u, stratum: s };
    }
  }
  return worst;
}

/** The balance a deal reaches: its largest deviation, where, and whether in a part or a fold. */
export interface BalanceWorst extends Deviation {
  kind: 'part' | 'fold';
}

/**
 * The measure the tolerance promise is about: the larger of maxDeviation over the parts
 * (`parts[u * strata + s]`, `partUnits` of them) and over the fold units (`folds`, null without
 * folds: each split's folds, the split's partitions together), the parts' where they are equal.
 */
export function balanceOfUnits(
  parts: ArrayLike<number>,
  partUnits: number,
  folds: ArrayLike<number> | null,
  foldUnits: number,
  strataSizes: ArrayLike<number>,
): BalanceWorst {
  const part = maxDeviation(parts, partUnits, strataSizes);
  const fold = folds === null ? { deviation: 0, unit: -1, stratum: -1 } : maxDeviation(folds, foldUnits, strataSizes);
  return fold.deviation > part.deviation ? { ...fold, kind: 'fold' } : { ...part, kind: 'part' };
}

/** A deal's cells: (split, partition, fold), cell = (split * partitions + partition) * folds + fold. */
export interface DealShape {
  splits: number;
  partitions: number;
  folds: number;
}

/**
 * balanceOfUnits of a deal's records per cell and stratum: `cells[c * strata + s]` ('by-cell',
 * as shuffle's plan keeps them) or `cells[s * cellCount + c]` ('by-stratum', as countCells gives
 * them). Part units are (split, partition); fold units (split, fold).
 */
export function dealBalance(cells: ArrayLike<number>, strataSizes: ArrayLike<number>, shape: DealShape, layout: 'by-cell' | 'by-stratum' = 'by-cell'): BalanceWorst {
  const S = strataSizes.length;
  const P = shape.partitions;
  const K = shape.folds;
  const C = shape.splits * P * K;
  const parts = new Float64Array(shape.splits * P * S);
  const folds = K > 1 ? new Float64Array(shape.splits * K * S) : null;
  for (let c = 0; c < C; c++) {
    const part = Math.floor(c / K);
    const fold = Math.floor(c / (P * K)) * K + (c % K);
    for (let s = 0; s < S; s++) {
      const n = layout === 'by-cell' ? cells[c * S + s]! : cells[s * C + c]!;
      parts[part * S + s]! += n;
      if (folds !== null) folds[fold * S + s]! += n;
    }
  }
  return balanceOfUnits(parts, shape.splits * P, folds, shape.splits * K, strataSizes);
}

/** Allowance for rounding when a deviation is held against the tolerance. */
const TOLERANCE_SLACK = 1e-12;

/** Whether a deviation keeps the tolerance (the one comparison shuffle, verify and profile make). */
export function withinTolerance(deviation: number, tolerance: number): boolean {
  return deviation <= tolerance + TOLERANCE_SLACK;
}
