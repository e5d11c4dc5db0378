/**
 * ByteIdTable against a plain Map of strings (the obvious implementation) on key streams shaped
 * like class columns: long runs of one value (sorted inputs), values interleaved, and look-alike
 * values that share their length and differ in one byte, or are prefixes of each other.
 */
import { describe, expect, it } from 'vitest';
import { ByteIdTable } from '../src/core/byte-table.js';
import { createRandom } from './helpers/engine.js';

function idsByTable(keys: string[]): number[] {
  const t = new ByteIdTable();
  const data = Buffer.from(keys.join(''), 'latin1');
  const out: number[] = [];
  let at = 0;
  let next = 0;
  for (const k of keys) {
    const e = at + k.length;
    let id = t.lookup(data, at, e);
    if (id < 0) {
      id = next++;
      t.insert(data, at, e, id);
    }
    out.push(id);
    at = e;
  }
  return out;
}

function idsByMap(keys: string[]): number[] {
  const m = new Map<string, number>();
  return keys.map((k) => {
    if (!m.has(k)) m.set(k, m.size);
    return m.get(k)!;
  });
}

describe('ByteIdTable', () => {
  it('gives every value the id a Map of strings gives it, in runs, interleaved and for look-alikes', () => {
    const rnd = createRandom(11);
    const alike = ['drift-a', 'drift-b', 'drifta-', 'drift-', 'drift-ab', 'x'.repeat(70), 'x'.repeat(69) + 'y'];
    const many = Array.from({ length: 600 }, (_, i) => `c${i}`); // past the table's first growth
    for (let round = 0; round < 20; round++) {
      const keys: string[] = [];
      while (keys.length < 3000) {
        const pool = rnd() < 0.5 ? alike : many;
        const v = pool[Math.floor(rnd() * pool.length)]!;
        const run = rnd() < 0.5 ? 1 : 1 + Math.floor(rnd() * 40);
        for (let r = 0; r < run; r++) keys.push(v);
      }
      expect(idsByTable(keys)).toEqual(idsByMap(keys));
    }
  });
});
