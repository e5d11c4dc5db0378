/**
 * Keyed pseudorandom permutations of [0, n), computed one element at a time: rank r of a stratum
 * maps to dealing position π(r) without a table of the whole permutation, so every bucket can be
 * dealt on its own.
 *
 * Why the dealing needs one (docs/design.md, "Membership and order"): a part is written in key
 * order. If the r-th record of a class (in key order) went to the cell of dealing position r, a
 * cyclic dealing rule would hand each part every P-th record of each class, and the classes
 * would come out evenly interleaved instead of shuffled. Dealing position π(r) instead keeps the
 * multiset of positions (so every count and quota is exactly what it was) while which record
 * takes which position no longer follows key order.
 *
 * Construction: a Feistel network over b = ⌈log2 n⌉ bits (at least 2), split into a left part
 * of ⌈b/2⌉ bits and a right part of ⌊b/2⌋ bits whose widths swap every round (an unbalanced
 * Feistel network is a bijection on b-bit strings for any round function). Values ≥ n are
 * mapped again until one falls inside [0, n) ("cycle walking": the first value of the orbit
 * back inside the domain; it is a bijection of [0, n) because the network is one on [0, 2^b)).
 * 2^b < 2n, so fewer than two steps are needed on average. The round function is MurmurHash3's
 * 32-bit finaliser of (half ^ round key); the round keys come from the seed's secret and the
 * stratum. Four rounds: with pseudorandom round functions that is what makes a Feistel network a
 * strong pseudorandom permutation (Luby and Rackoff, 1988; from memory). Each round costs a few
 * nanoseconds, and the dealing pays it once a record (or twice, when a value walks out of range).
 */
import { hashWords3, type Secret } from './hash.js';

export const PERMUTE_ROUNDS = 4;

/** Tag mixed into the round keys, so they differ from every other use of the seed's secret. */
const ROUND_KEY_TAG = 0x7065726d;

/** A permutation of [0, n): its domain, bit widths and round keys. Plain data. */
export interface RankPermutation {
  n: number;
  /** Bits of the left part (the high bits of a value). */
  leftBits: number;
  /** Bits of the right part (the low bits). */
  rightBits: number;
  keys: Int32Array;
}

/** The permutation of stratum `stratum`'s ranks [0, n) under `secret`. */
export function rankPermutation(secret: Secret, stratum: number, n: number): RankPermutation {
  let bits = 2;
  while (2 ** bits < n) bits++;
  const keys = new Int32Array(PERMUTE_ROUNDS);
  for (let r = 0; r < PERMUTE_ROUNDS; r++) keys[r] = hashWords3(secret, ROUND_KEY_TAG, stratum, r)[0]!;
  return { n, leftBits: Math.ceil(bits / 2), rightBits: Math.floor(bits / 2), keys };
}

function fmix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

/** One pass of the network over [0, 2^b) for b ≤ 31: int32 shifts and masks, rounds two at a time. */
function feistel31(p: RankPermutation, x: number): number {
  const keys = p.keys;
  const rb = p.rightBits;
  const maskL = (1 << p.leftBits) - 1;
  const maskR = (1 << rb) - 1;
  let left = x >>> rb;
  let right = x & maskR;
  for (let r = 0; r < PERMUTE_ROUNDS; r += 2) {
    // (L: leftBits, R: rightBits) -> (R, L ^ F(R)): the new right part has leftBits bits.
    let next = left ^ (fmix32(right ^ keys[r]!) & maskL);
    left = right;
    right = next;
    // And back: (L: rightBits, R: leftBits) -> (R, L ^ F(R)) with rightBits bits.
    next = left ^ (fmix32(right ^ keys[r + 1]!) & maskR);
    left = right;
    right = next;
  }
  return ((left << rb) | right) >>> 0;
}

/** The same for b up to 53 bits (halves of at most 27 bits), in floating point where a value exceeds 31 bits. */
function feistel53(p: RankPermutation, x: number): number {
  const keys = p.keys;
  const rb = p.rightBits;
  const split = 2 ** rb;
  const maskL = 2 ** p.leftBits - 1;
  const maskR = split - 1;
  let left = Math.floor(x / split);
  let right = x - left * split;
  for (let r = 0; r < PERMUTE_ROUNDS; r += 2) {
    let next = left ^ (fmix32(right ^ keys[r]!) & maskL);
    left = right;
    right = next;
    next = left ^ (fmix32(right ^ keys[r + 1]!) & maskR);
    left = right;
    right = next;
  }
  return left * split + right;
}

/** π(r) for r in [0, n). */
export function permuteRank(p: RankPermutation, r: number): number {
  if (p.n <= 1) return r;
  if (p.leftBits + p.rightBits <= 31) {
    let x = feistel31(p, r);
    while (x >= p.n) x = feistel31(p, x);
    return x;
  }
  let x = feistel53(p, r);
  while (x >= p.n) x = feistel53(p, x);
  return x;
}

/**
 * Every stratum's permutation in typed arrays, for dealing a bucket's records in one tight loop
 * (`permuteRanks`): a function call and an object per record cost more than the four rounds.
 */
export interface PermutationTable {
  n: Float64Array;
  rightBits: Int32Array;
  maskL: Int32Array;
  maskR: Int32Array;
  /** PERMUTE_ROUNDS keys a stratum. */
  keys: Int32Array;
  /** Strata over more than 2^31 ranks: their permutation object, taken record by record. */
  wide: Map<number, RankPermutation>;
}

export function permutationTable(perms: RankPermutation[]): PermutationTable {
  // permuteRanks writes the rounds out one by one.
  if (PERMUTE_ROUNDS !== 4) throw new Error('internal: permuteRanks is written for 4 rounds');
  const S = perms.length;
  const t: PermutationTable = { n: new Float64Array(S), rightBits: new Int32Array(S), maskL: new Int32Array(S), maskR: new Int32Array(S), keys: new Int32Array(S * PERMUTE_ROUNDS), wide: new Map() };
  perms.forEach((p, s) => {
    t.n[s] = p.n;
    if (p.leftBits + p.rightBits > 31) t.wide.set(s, p);
    t.rightBits[s] = p.rightBits;
    t.maskL[s] = (2 ** p.leftBits - 1) | 0;
    t.maskR[s] = (2 ** p.rightBits - 1) | 0;
    t.keys.set(p.keys, s * PERMUTE_ROUNDS);
  });
  return t;
}

/** ranks[k] ← π_{strata[k]}(ranks[k]) for k < count: `permuteRank` with its four rounds written out. */
export function permuteRanks(t: PermutationTable, ranks: Float64Array, strata: Uint32Array, count: number): void {
  const { n: size, rightBits, maskL, maskR, keys, wide } = t;
  for (let k = 0; k < count; k++) {
    const s = strata[k]!;
    const n = size[s]!;
    if (n <= 1) continue;
    if (wide.size > 0 && wide.has(s)) {
      ranks[k] = permuteRank(wide.get(s)!, ranks[k]!);
      continue;
    }
    const rb = rightBits[s]!;
    const mL = maskL[s]!;
    const mR = maskR[s]!;
    const ko = s * PERMUTE_ROUNDS;
    const k0 = keys[ko]!;
    const k1 = keys[ko + 1]!;
    const k2 = keys[ko + 2]!;
    const k3 = keys[ko + 3]!;
    let x = ranks[k]! | 0;
    do {
      let left = x >>> rb;
      let right = x & mR;
      let h = right ^ k0;
      h ^= h >>> 16;
      h = Math.imul(h, 0x85ebca6b);
      h ^= h >>> 13;
      h = Math.imul(h, 0xc2b2ae35);
      h ^= h >>> 16;
      let next = left ^ (h & mL);
      left = right;
      right = next;
      h = right ^ k1;
      h ^= h >>> 16;
      h = Math.imul(h, 0x85ebca6b);
      h ^= h >>> 13;
      h = Math.imul(h, 0xc2b2ae35);
      h ^= h >>> 16;
      next = left ^ (h & mR);
      left = right;
      right = next;
      h = right ^ k2;
      h ^= h >>> 16;
      h = Math.imul(h, 0x85ebca6b);
      h ^= h >>> 13;
      h = Math.imul(h, 0xc2b2ae35);
      h ^= h >>> 16;
      next = left ^ (h & mL);
      left = right;
      right = next;
      h = right ^ k3;
      h ^= h >>> 16;
      h = Math.imul(h, 0x85ebca6b);
      h ^= h >>> 13;
      h = Math.imul(h, 0xc2b2ae35);
      h ^= h >>> 16;
      next = left ^ (h & mR);
      left = right;
      right = next;
      x = ((left << rb) | right) >>> 0;
    } while (x >= n);
    ranks[k] = x;
  }
}
