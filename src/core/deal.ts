/**
 * Dealing: which part (split × partition) and fold each record goes to, decided from counts
 * alone so that every bucket can be dealt independently, in any order, on any thread.
 *
 * Within one stratum the records in key order are a uniformly random ordering. The r-th of them
 * (its rank) takes the dealing position x = π(r), where π is a keyed pseudorandom permutation of
 * the stratum's ranks (permute.ts), and the position decides the cell by a fixed rule:
 *   1. split: contiguous blocks of positions of the stratum's split quotas (quotas within one
 *      record of the weight, leftovers to the split furthest behind overall);
 *   2. inside split i, the position j in that split's dealing sequence continues from stratum to
 *      stratum (strata in a seeded order), and cell t = j mod (P·K) gives the partition
 *      p = t mod P and the fold f = (t + ⌊t / lcm(P,K)⌋) mod K. Each cell is visited once per
 *      cycle (counts per stratum and cell within one), partitions cycle with period P (per
 *      stratum within one, totals within one), folds within two.
 * The counts depend only on the multiset of positions, which π does not change; π makes which
 * record takes which position independent of key order, so the records a part holds, kept in
 * key order, come in a uniformly random order (docs/design.md, "Membership and order").
 * This module is pure: no I/O.
 */
import { hashToUnit, hashWords3, type Secret } from './hash.js';
import { permutationTable, permuteRank, rankPermutation, type PermutationTable, type RankPermutation } from './permute.js';

/**
 * Which dealing scheme this code implements, recorded in the manifest. 1: rank r dealt to
 * position r (parts came out with their classes evenly interleaved); 2: rank r dealt to π(r).
 */
export const DEALING_SCHEME = 2;

export interface SplitSpec {
  name: string;
  /** Fraction of the records (the options make them add up to 1; here they are normalised) or, with `exact`, a record count. */
  weight: number;
}

export interface DealSpec {
  splits: SplitSpec[];
  /** True when weights are record counts that must be met exactly. */
  exactCounts: boolean;
  partitions: number;
  folds: number;
}

/** Per-stratum quotas and offsets that turn a (stratum, rank) into a cell. */
export interface DealTable {
  spec: DealSpec;
  /** Strata in dealing order; index = dealing stratum id. */
  strataCount: number;
  /** `quota[s * S + i]`: records of stratum s in split i. */
  quota: Float64Array;
  /** `cumQuota[s * (S + 1) + i]`: first rank of stratum s that goes to split i. */
  cumQuota: Float64Array;
  /** `offset[s * S + i]`: position in split i's dealing sequence of stratum s's first record there. */
  offset: Float64Array;
  /** Secret of the rank permutations (derived from the seed); null deals rank r to position r (scheme 1). */
  rankSecret: Secret | null;
  /** Each stratum's rank permutation, made when first needed. */
  perms: (RankPermutation | undefined)[];
  /** All of them in typed arrays (stratumPermutations), made when first needed. */
  permTable?: PermutationTable;
}

/** Stratum s's rank permutation (over its size, cumQuota's last entry for s). */
export function stratumPermutation(table: DealTable, s: number): RankPermutation | null {
  if (!table.rankSecret) return null;
  const S = table.spec.splits.length;
  return (table.perms[s] ??= rankPermutation(table.rankSecret, s, table.cumQuota[s * (S + 1) + S]!));
}

/** Every stratum's permutation in one table (permuteRanks), or null without a rank secret. */
export function stratumPermutations(table: DealTable): PermutationTable | null {
  if (!table.rankSecret) return null;
  table.permTable ??= permutationTable(Array.from({ length: table.strataCount }, (_, s) => stratumPermutation(table, s)!));
  return table.permTable;
}

/** The dealing position of the record of rank `rank` in stratum `s`. */
export function dealPosition(table: DealTable, s: number, rank: number): number {
  const p = stratumPermutation(table, s);
  return p ? permuteRank(p, rank) : rank;
}

/** Where each split's dealing cycle starts: drawn from the seed's secret, one per split. */
export function seededStarts(secret: Secret, splits: number): number[] {
  return Array.from({ length: splits }, (_, i) => hashWords3(secret, 0x73746172, i, 0)[0]!);
}

export function gcd(a: number, b: number): number {
  while (b) [a, b] = [b, a % b];
  return a;
}

/** Maps a position in a split's dealing sequence to (partition, fold). */
export function cellOf(j: number, partitions: number, folds: number): { partition: number; fold: number } {
  const m = partitions * folds;
  const t = j % m;
  const l = (partitions * folds) / gcd(partitions, folds);
  return { partition: t % partitions, fold: (t + Math.floor(t / l)) % folds };
}

/**
 * Splits each stratum's records over the splits. Strata are taken in dealing order; every
 * stratum's quota for a split is the floor or the ceiling of its weighted share, and the
 * leftover records go to the splits furthest behind their overall target, which keeps the
 * split totals within about one record of their targets too.
 */
export function computeQuotas(strataSizes: ArrayLike<number>, spec: DealSpec): Float64Array {
  const S = spec.splits.length;
  const nStrata = strataSizes.length;
  const quota = new Float64Array(nStrata * S);
  let total = 0;
  for (let s = 0; s < nStrata; s++) total += strataSizes[s]!;
  const wsum = spec.splits.reduce((a, b) => a + b.weight, 0);
  const w = spec.splits.map((x) => x.weight / wsum);
  const given = new Float64Array(S);
  let seen = 0;
  const idx = Array.from({ length: S }, (_, i) => i);
  const deficit = new Float64Array(S);
  const frac = new Float64Array(S);
  for (let s = 0; s < nStrata; s++) {
    const n = strataSizes[s]!;
    seen += n;
    let left = n;
    for (let i = 0; i < S; i++) {
      const share = w[i]! * n;
      const base = Math.floor(share + 1e-9);
      quota[s * S + i] = base;
      left -= base;
      frac[i] = share - base;
      // Targets use exact rational arithmetic where counts are given, to land exactly on them.
      const target = spec.exactCounts ? (spec.splits[i]!.weight * seen) / wsum : w[i]! * seen;
      deficit[i] = target - given[i]! - base;
    }
    // Only splits with a fractional share may take a leftover (else one would end a whole record
    // above its share); among them, the one furthest behind overall goes first.
    idx.sort((a, b) => Number(frac[b]! > 1e-9) - Number(frac[a]! > 1e-9) || deficit[b]! - deficit[a]! || frac[b]! - frac[a]! || a - b);
    for (let k = 0; k < left; k++) quota[s * S + idx[k % S]!]! += 1;
    for (let i = 0; i < S; i++) given[i]! += quota[s * S + i]!;
  }
  return quota;
}

/**
 * Builds the dealing table from the stratum sizes (already in dealing order). `starts[i]` is
 * where split i's dealing sequence begins (drawn from the seed), so which partitions and folds
 * receive the leftover records of a stratum is random too, not always the first ones.
 * `rankSecret` keys the rank permutations (see the module's comment).
 */
export function buildDealTable(strataSizes: ArrayLike<number>, spec: DealSpec, starts: ArrayLike<number> = [], rankSecret: Secret | null = null): DealTable {
  const S = spec.splits.length;
  const nStrata = strataSizes.length;
  const quota = computeQuotas(strataSizes, spec);
  const cumQuota = new Float64Array(nStrata * (S + 1));
  const offset = new Float64Array(nStrata * S);
  const running = new Float64Array(S);
  for (let i = 0; i < S; i++) running[i] = (starts[i] ?? 0) % (spec.partitions * spec.folds);
  for (let s = 0; s < nStrata; s++) {
    let c = 0;
    for (let i = 0; i < S; i++) {
      cumQuota[s * (S + 1) + i] = c;
      c += quota[s * S + i]!;
      offset[s * S + i] = running[i]!;
      running[i]! += quota[s * S + i]!;
    }
    cumQuota[s * (S + 1) + S] = c;
  }
  return { spec, strataCount: nStrata, quota, cumQuota, offset, rankSecret, perms: [] };
}

/**
 * The cell of the record of rank `rank` within stratum `s`. Returns split index, partition and
 * fold packed as `split * P * K + partition * K + fold` (a "cell id").
 */
export function dealRecord(table: DealTable, s: number, rank: number): number {
  const { splits, partitions: P, folds: K } = table.spec;
  const S = splits.length;
  const base = s * (S + 1);
  const x = dealPosition(table, s, rank);
  let i = 0;
  while (i < S - 1 && x >= table.cumQuota[base + i + 1]!) i++;
  const j = table.offset[s * S + i]! + (x - table.cumQuota[base + i]!);
  const m = P * K;
  const t = j % m;
  const l = m / gcd(P, K);
  const p = t % P;
  const f = (t + Math.floor(t / l)) % K;
  return (i * P + p) * K + f;
}

/** Count of integers j in [a, b) with j ≡ t (mod m). */
function countResidue(a: number, b: number, t: number, m: number): number {
  if (b <= a) return 0;
  return Math.floor((b - 1 - t) / m) - Math.floor((a - 1 - t) / m);
}

/**
 * Exact per-cell counts of every stratum, computed from the table without dealing a record:
 * `result[s * cells + cell]`. Lets the tolerance be checked before anything is written.
 */
export function countCells(table: DealTable): Float64Array {
  const { splits, partitions: P, folds: K } = table.spec;
  const S = splits.length;
  const m = P * K;
  const l = m / gcd(P, K);
  const cells = S * m;
  const out = new Float64Array(table.strataCount * cells);
  for (let s = 0; s < table.strataCount; s++) {
    for (let i = 0; i < S; i++) {
      const a = table.offset[s * S + i]!;
      const b = a + table.quota[s * S + i]!;
      for (let t = 0; t < m; t++) {
        const n = countResidue(a, b, t, m);
        if (!n) continue;
        const p = t % P;
        const f = (t + Math.floor(t / l)) % K;
        out[s * cells + (i * P + p) * K + f]! += n;
      }
    }
  }
  return out;
}

/**
 * Cell id for `--assign hash`: a pure function of the record's key and the seed's cell secret,
 * so a record keeps its cell when other records are added. Splits take shares of [0, 1) by
 * weight; inside a split, partitions and folds share it evenly.
 */
export function hashedCell(deal: DealSpec, cellSecret: Secret, keyHi: number, keyLo: number): number {
  const { splits, partitions: P, folds: K } = deal;
  const h = hashWords3(cellSecret, keyHi, keyLo, 0x63656c6c);
  const u = hashToUnit(h[0]!, h[1]!);
  const wsum = splits.reduce((a, b) => a + b.weight, 0);
  let acc = 0;
  let split = splits.length - 1;
  let lo = 0;
  let hi = 1;
  for (let i = 0; i < splits.length; i++) {
    const next = acc + splits[i]!.weight / wsum;
    if (u < next || i === splits.length - 1) {
      split = i;
      lo = acc;
      hi = next;
      break;
    }
    acc = next;
  }
  const v = Math.min(0.9999999999999999, (u - lo) / (hi - lo));
  const t = Math.floor(v * P * K);
  return (split * P + (t % P)) * K + Math.floor(t / P);
}
