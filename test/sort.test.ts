/**
 * sortByKey against a plain comparison sort (Array.prototype.sort with compareRecords, the
 * definition of the order): random keys, keys sharing their top bits as in a bucket, ties in the
 * 32 sorted bits, in the whole key, and crowds of equal keys; every size path (a comparison
 * sort below 256 records, three 11-bit passes, two 16-bit passes from 65,536), with the radix
 * passes in WebAssembly and in JavaScript.
 */
import { afterAll, describe, expect, it } from 'vitest';
import seedrandom from 'seedrandom';
import { compareRecords, sortByKey, sortsInWasm, useSortKernel, type SortKeys } from '../src/core/sort.js';
import { flags } from '../src/flags.js';

// The module's sources are checked with the others' in test/kernels.test.ts.
afterAll(() => useSortKernel(true));

function makeKeys(rng: () => number, n: number, bits: number, style: 'random' | 'ties' | 'crowd'): SortKeys {
  const keyHi = new Uint32Array(n);
  const keyLo = new Uint32Array(n);
  const top = Math.floor(rng() * 2 ** 32);
  const ident: [number, number][] = [];
  for (let i = 0; i < n; i++) {
    let hi = Math.floor(rng() * 2 ** 32);
    let lo = Math.floor(rng() * 2 ** 32);
    if (style === 'ties' && i > 0 && rng() < 0.2) {
      const j = Math.floor(rng() * i);
      hi = keyHi[j]!;
      // Same 32 sorted bits, or the same whole key.
      lo = rng() < 0.5 ? keyLo[j]! : (keyLo[j]! & ~0xff) | Math.floor(rng() * 256);
    }
    if (style === 'crowd' && rng() < 0.6) {
      hi = 0x12345678;
      lo = 0x9abcdef0;
    }
    // All keys of a bucket share their top `bits` bits.
    if (bits > 0) hi = ((top >>> (32 - bits)) << (32 - bits)) | (hi >>> bits);
    keyHi[i] = hi >>> 0;
    keyLo[i] = lo >>> 0;
    ident.push([Math.floor(rng() * 3), Math.floor(rng() * 1e9)]);
  }
  return { keyHi, keyLo, identity: (i) => ident[i]! };
}

// ROWDECK_SORT=js (a run of the suite without the modules) leaves only the JavaScript passes.
const paths: [string, boolean][] = flags.sort === 'js' ? [['JavaScript', false]] : [['WebAssembly', true], ['JavaScript', false]];

describe.each(paths)('sortByKey, radix passes in %s', (_, wasm) => {
  it('gives the order of a comparison sort by (key, identity), on every size path', () => {
    useSortKernel(wasm);
    expect(sortsInWasm()).toBe(wasm);
    const rng = seedrandom('rowdeck-sort-1');
    let cases = 0;
    for (const n of [0, 1, 7, 255, 256, 300, 1000, 4096, 10000, 70000]) {
      for (const bits of [0, 10]) {
        for (const style of ['random', 'ties', 'crowd'] as const) {
          if (n === 70000 && style !== 'random') continue; // the 16-bit passes: one case is enough for time
          const keys = makeKeys(rng, n, bits, style);
          const expected = Array.from({ length: n }, (_, i) => i).sort((a, b) => compareRecords(keys, a, b));
          expect(Array.from(sortByKey(keys, n, bits)), `n ${n}, bits ${bits}, ${style}`).toEqual(expected);
          cases++;
        }
      }
    }
    expect(cases).toBe(56);
  });
});
