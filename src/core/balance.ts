/**
 * Class balance: the seeded order strata are dealt in, the greedy placement of whole groups,
 * and the measure the tolerance promise is checked with. Pure.
 */
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

export interface GroupUnit {
  hi: number;
  lo: number;
  size: number;
  /** Records per (dealing) stratum. */
  strata: Map<number, number>;
}

/**
 * Places groups as units into cells. Largest groups first (ties by key, which is seeded); each
 * goes to the cell whose class histogram is furthest behind its target for the group's classes,
 * weighing the cell's total size too. Returns the cell of each group, in input order.
 *
 * `cellWeight[c]` is the fraction of all records cell c should receive.
 */
export function placeGroups(groups: GroupUnit[], strataSizes: ArrayLike<number>, cellWeight: number[]): Uint32Array {
  const C = cellWeight.length;
  const nStrata = strataSizes.length;
  const total = Array.from(strataSizes).reduce((a, b) => a + b, 0);
  const have = new Float64Array(C * nStrata);
  const haveTotal = new Float64Array(C);
  const order = groups.map((_, i) => i).sort((a, b) => groups[b]!.size - groups[a]!.size || groups[a]!.hi - groups[b]!.hi || groups[a]!.lo - groups[b]!.lo);
  const out = new Uint32Array(groups.length);
  for (const gi of order) {
    const g = groups[gi]!;
    let best = -1;
    let bestScore = -Infinity;
    const rot = g.lo % C;
    for (let k = 0; k < C; k++) {
      const c = (k + rot) % C;
      const w = cellWeight[c]!;
      if (w === 0) continue;
      // Deficit, in units of "records this cell should still get", per class of the group,
      // normalised by the class size so rare classes count as much as common ones.
      let score = 0;
      for (const [s, n] of g.strata) {
        const target = w * strataSizes[s]!;
        score += (n * (target - have[c * nStrata + s]!)) / strataSizes[s]!;
      }
      score += (g.size * (w * total - haveTotal[c]!)) / total;
      if (score > bestScore) {
        bestScore = score;
        best = c;
      }
    }
    out[gi] = best;
    for (const [s, n] of g.strata) have[best * nStrata + s]! += n;
    haveTotal[best]! += g.size;
  }
  return out;
}

/**
 * Largest relative deviation of a stratum's share in a unit (a part, or a fold) from its share
 * in the whole: max over units u and strata s of |n(u,s)/n(u) − N(s)/N| / (N(s)/N).
 * `counts[u * strata + s]`. Units with no records are skipped. Returns the worst case too.
 */
export function maxDeviation(
  counts: ArrayLike<number>,
  units: number,
  strataSizes: ArrayLike<number>,
): { deviation: number; unit: number; stratum: number } {
  const nStrata = strataSizes.length;
  let total = 0;
  for (let s = 0; s < nStrata; s++) total += strataSizes[s]!;
  let worst = { deviation: 0, unit: -1, stratum: -1 };
  for (let u = 0; u < units; u++) {
    let nu = 0;
    for (let s = 0; s < nStrata; s++) nu += counts[u * nStrata + s]!;
    if (nu === 0) continue;
    for (let s = 0; s < nStrata; s++) {
      const global = strataSizes[s]! / total;
      if (global === 0) continue;
      const dev = Math.abs(counts[u * nStrata + s]! / nu - global) / global;
      if (dev > worst.deviation + 1e-15) worst = { deviation: dev, unit: u, stratum: s };
    }
  }
  return worst;
}
