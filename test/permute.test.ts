/**
 * The rank permutation of the dealing (src/core/permute.ts): a bijection of [0, n) for every n,
 * the batch form equal to the single one, and keyed (another seed or stratum, another
 * permutation). The uniformity of the order it gives is tested on outputs in order.test.ts.
 */
import { describe, expect, it } from 'vitest';
import { deriveSecret } from '../src/core/hash.js';
import { permutationTable, permuteRank, permuteRanks, rankPermutation } from '../src/core/permute.js';

describe('rank permutation', () => {
  it('is a bijection of [0, n) for every n up to 600 and a few larger ones', () => {
    const secret = deriveSecret('bijection');
    for (const n of [...Array.from({ length: 600 }, (_, i) => i + 1), 1023, 1024, 1025, 65537, 100_003]) {
      const p = rankPermutation(secret, n % 7, n);
      const hit = new Uint8Array(n);
      for (let r = 0; r < n; r++) {
        const x = permuteRank(p, r);
        expect(x >= 0 && x < n && Number.isInteger(x)).toBe(true);
        hit[x]!++;
      }
      expect(hit.every((h) => h === 1), `n = ${n}`).toBe(true);
    }
  });

  it('the batch form gives the single form, across strata of any size (one over 2^31 ranks too)', () => {
    const secret = deriveSecret('batch');
    const sizes = [1, 2, 3, 17, 1000, 2 ** 20 + 5, 3_000_000_000];
    const perms = sizes.map((n, s) => rankPermutation(secret, s, n));
    const table = permutationTable(perms);
    const count = 5000;
    const strata = new Uint32Array(count);
    const ranks = new Float64Array(count);
    for (let k = 0; k < count; k++) {
      strata[k] = k % sizes.length;
      ranks[k] = (k * 7919) % sizes[strata[k]!]!;
    }
    const want = Array.from(ranks, (r, k) => permuteRank(perms[strata[k]!]!, r));
    permuteRanks(table, ranks, strata, count);
    expect(Array.from(ranks)).toEqual(want);
  });

  it('depends on the seed and the stratum', () => {
    const a = rankPermutation(deriveSecret('one'), 0, 1000);
    const b = rankPermutation(deriveSecret('two'), 0, 1000);
    const c = rankPermutation(deriveSecret('one'), 1, 1000);
    const first = (p: typeof a): number[] => Array.from({ length: 20 }, (_, r) => permuteRank(p, r));
    expect(first(a)).not.toEqual(first(b));
    expect(first(a)).not.toEqual(first(c));
    // Not the identity either: consecutive ranks land far apart.
    const gaps = first(a).slice(1).map((x, i) => Math.abs(x - first(a)[i]!));
    expect(gaps.filter((g) => g <= 1).length).toBeLessThan(3);
  });
});
