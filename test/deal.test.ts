/**
 * The dealing rules in src/core/deal.ts, checked by brute force: every record dealt one by one
 * must agree with the closed-form counts, and the promised bounds must hold.
 */
import { describe, expect, it } from 'vitest';
import { buildDealTable, cellOf, computeQuotas, countCells, dealRecord, seededStarts, type DealSpec } from '../src/core/deal.js';
import { deriveSecret, Fingerprint, fingerprintAligned, fingerprintBytes } from '../src/core/hash.js';
import { createRandom } from './helpers/engine.js';

function dealAll(sizes: number[], spec: DealSpec, starts: number[]): Float64Array {
  const table = buildDealTable(sizes, spec, starts);
  const cells = spec.splits.length * spec.partitions * spec.folds;
  const out = new Float64Array(sizes.length * cells);
  sizes.forEach((n, s) => {
    for (let r = 0; r < n; r++) out[s * cells + dealRecord(table, s, r)]!++;
  });
  return out;
}

describe('dealing', () => {
  const rnd = createRandom(7);
  const cases = Array.from({ length: 60 }, (_, k) => {
    const strata = 1 + Math.floor(rnd() * 6);
    const sizes = Array.from({ length: strata }, () => Math.floor(rnd() * 200));
    const partitions = 1 + Math.floor(rnd() * 6);
    const folds = rnd() < 0.5 ? 1 : 2 + Math.floor(rnd() * 5);
    const named = rnd() < 0.4;
    const splits = named ? [{ name: 'a', weight: 0.7 }, { name: 'b', weight: 0.2 }, { name: 'c', weight: 0.1 }] : [{ name: '', weight: 1 }];
    return { k, sizes, spec: { splits, exactCounts: false, partitions, folds } satisfies DealSpec, starts: splits.map(() => Math.floor(rnd() * 1000)) };
  });

  it.each(cases)('case $k: closed-form counts equal dealing record by record', ({ sizes, spec, starts }) => {
    const table = buildDealTable(sizes, spec, starts);
    expect(Array.from(countCells(table))).toEqual(Array.from(dealAll(sizes, spec, starts)));
  });

  it.each(cases)('case $k: per stratum, partitions within one and cells within one of their share', ({ sizes, spec, starts }) => {
    const { partitions: P, folds: K } = spec;
    const S = spec.splits.length;
    const counts = dealAll(sizes, spec, starts);
    const quota = computeQuotas(sizes, spec);
    const cells = S * P * K;
    sizes.forEach((_, s) => {
      for (let i = 0; i < S; i++) {
        const q = quota[s * S + i]!;
        for (let p = 0; p < P; p++) {
          let inPart = 0;
          for (let f = 0; f < K; f++) {
            const c = counts[s * cells + (i * P + p) * K + f]!;
            expect(Math.abs(c - q / (P * K))).toBeLessThan(1);
            inPart += c;
          }
          expect(Math.abs(inPart - q / P)).toBeLessThan(1);
        }
      }
    });
  });

  it.each(cases)('case $k: split quotas within one record of the weight per stratum, totals within two', ({ sizes, spec }) => {
    const S = spec.splits.length;
    const quota = computeQuotas(sizes, spec);
    const total = sizes.reduce((a, b) => a + b, 0);
    for (let i = 0; i < S; i++) {
      const w = spec.splits[i]!.weight;
      let sum = 0;
      sizes.forEach((n, s) => {
        expect(Math.abs(quota[s * S + i]! - n * w)).toBeLessThan(1);
        sum += quota[s * S + i]!;
      });
      expect(Math.abs(sum - total * w)).toBeLessThanOrEqual(2);
    }
    sizes.forEach((n, s) => expect(Array.from(quota.subarray(s * S, s * S + S)).reduce((a, b) => a + b, 0)).toBe(n));
  });

  it('visits every (partition, fold) cell once per cycle, also when they share factors', () => {
    for (const [P, K] of [
      [2, 2],
      [4, 6],
      [3, 5],
      [8, 4],
    ] as const) {
      const seen = new Set<string>();
      for (let t = 0; t < P * K; t++) {
        const c = cellOf(t, P, K);
        seen.add(`${c.partition}/${c.fold}`);
      }
      expect(seen.size).toBe(P * K);
    }
  });

  it('exact counts as weights land exactly on them', () => {
    const sizes = [37, 1000, 5, 411];
    const spec: DealSpec = { splits: [{ name: 'train', weight: 1000 }, { name: 'test', weight: 453 }], exactCounts: true, partitions: 1, folds: 1 };
    const q = computeQuotas(sizes, spec);
    expect(q[0]! + q[2]! + q[4]! + q[6]!).toBe(1000);
    expect(q[1]! + q[3]! + q[5]! + q[7]!).toBe(453);
  });

  it('seeded starts depend on the seed', () => {
    expect(seededStarts(deriveSecret('a'), 3)).not.toEqual(seededStarts(deriveSecret('b'), 3));
    expect(seededStarts(deriveSecret('a'), 3)).toEqual(seededStarts(deriveSecret('a'), 3));
  });
});

describe('fingerprints', () => {
  it('give the same hash from bytes and from the aligned, zero-padded copy', () => {
    const rnd = createRandom(3);
    for (let len = 0; len < 70; len++) {
      const bytes = Uint8Array.from({ length: len }, () => Math.floor(rnd() * 256));
      const words = new Uint32Array(Math.ceil(len / 4) + 1);
      new Uint8Array(words.buffer).set(bytes);
      expect([...fingerprintAligned(words, 0, len)]).toEqual([...fingerprintBytes(bytes, 0, len)]);
      // The same record further into a larger array (the spill layout: after a 6-word header).
      const placed = new Uint32Array(words.length + 9);
      new Uint8Array(placed.buffer).set(bytes, 24);
      expect([...fingerprintAligned(placed, 6, len)]).toEqual([...fingerprintBytes(bytes, 0, len)]);
      // From any offset of a view that itself starts inside its buffer (long records are read
      // a word at a time through a view of the buffer; the two buffers alternate).
      const host = new Uint8Array(len + 16);
      for (let off = 0; off < 4; off++) {
        host.fill(0xa5).set(bytes, 3 + off);
        const view = host.subarray(3);
        expect([...fingerprintBytes(view, off, off + len)]).toEqual([...fingerprintAligned(words, 0, len)]);
      }
    }
  });

  it('are order-independent and notice a lost, doubled or changed record', () => {
    const recs = ['a,1', 'b,2', 'c,3', 'c,3', ''].map((s) => Buffer.from(s));
    const fp = (list: Buffer[]): string => {
      const f = new Fingerprint();
      for (const r of list) f.addBytes(r, 0, r.length);
      return f.toHex();
    };
    const base = fp(recs);
    expect(fp([...recs].reverse())).toBe(base);
    expect(fp(recs.slice(1))).not.toBe(base);
    expect(fp([...recs, recs[0]!])).not.toBe(base);
    expect(fp([Buffer.from('a,2'), ...recs.slice(1)])).not.toBe(base);
    // Merging partial fingerprints equals adding everything to one.
    const a = new Fingerprint();
    const b = new Fingerprint();
    recs.forEach((r, i) => (i % 2 ? a : b).addBytes(r, 0, r.length));
    a.merge(b);
    expect(a.toHex()).toBe(base);
    expect(a.count).toBe(5);
  });
});
