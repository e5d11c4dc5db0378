/**
 * The groups table of --group against a plain Map of Maps (the reference): random keys with
 * repeats and mixed classes, past many doublings of its arrays and slots, merged from several
 * tables with their class ids mapped, as stage 1's tasks are.
 */
import { describe, expect, it } from 'vitest';
import { GroupTable } from '../src/core/group-table.js';
import { createRandom } from './helpers/engine.js';

type Reference = Map<string, Map<number, number>>;

function fill(seed: number, adds: number, keys: number, classes: number): { adds: [number, number, number, number][]; ref: Reference } {
  const rnd = createRandom(seed);
  // Keys share hi words or lo words now and then, so both words must be compared.
  const pool = Array.from({ length: keys }, (_, i) => [i % 7 === 0 ? 12345 : Math.floor(rnd() * 2 ** 32), i % 11 === 0 ? 678 : Math.floor(rnd() * 2 ** 32)] as const);
  const list: [number, number, number, number][] = [];
  const ref: Reference = new Map();
  for (let i = 0; i < adds; i++) {
    const [hi, lo] = pool[Math.floor(rnd() * keys)]!;
    const s = rnd() < 0.7 ? (hi + lo) % classes : Math.floor(rnd() * classes);
    const n = 1 + Math.floor(rnd() * 3);
    list.push([hi, lo, s, n]);
    const k = `${hi}:${lo}`;
    const m = ref.get(k) ?? new Map<number, number>();
    m.set(s, (m.get(s) ?? 0) + n);
    ref.set(k, m);
  }
  return { adds: list, ref };
}

function contents(t: GroupTable): Reference {
  const out: Reference = new Map();
  for (let g = 0; g < t.count; g++) out.set(`${t.hi[g]}:${t.lo[g]}`, new Map(t.strataOf(g)));
  return out;
}

describe('GroupTable', () => {
  it('counts every group and class as a Map of Maps does, through many doublings', () => {
    const { adds, ref } = fill(3, 60000, 20000, 6);
    const t = new GroupTable(4);
    for (const [hi, lo, s, n] of adds) t.add(hi, lo, s, n);
    expect(t.count).toBe(ref.size);
    expect(contents(t)).toEqual(ref);
    for (let g = 0; g < t.count; g++) {
      expect(t.indexOf(t.hi[g]!, t.lo[g]!)).toBe(g);
      const list = t.strataOf(g);
      // Classes in increasing order, records adding up to the group's.
      expect(list.map(([s]) => s)).toEqual([...list.map(([s]) => s)].sort((a, b) => a - b));
      expect(list.reduce((a, [, n]) => a + n, 0)).toBe(t.records[g]);
    }
    expect(t.indexOf(1, 2)).toBe(-1);
    // Sealed, the table still reads the same, and refuses new groups.
    t.seal();
    expect(contents(t)).toEqual(ref);
    expect(() => t.add(1, 2, 0, 1)).toThrow(/sealed/);
  });

  it('merges tables with their classes mapped, in any order, to the same groups', () => {
    const parts = [fill(4, 8000, 3000, 4), fill(5, 8000, 3000, 4), fill(6, 8000, 3000, 4)];
    const maps = [(s: number) => s + 10, (s: number) => 13 - s, (s: number) => s * 2];
    const ref: Reference = new Map();
    parts.forEach(({ ref: r }, k) => {
      for (const [key, m] of r) {
        const into = ref.get(key) ?? new Map<number, number>();
        for (const [s, n] of m) into.set(maps[k]!(s), (into.get(maps[k]!(s)) ?? 0) + n);
        ref.set(key, into);
      }
    });
    const tables = parts.map(({ adds }) => {
      const t = new GroupTable();
      for (const [hi, lo, s, n] of adds) t.add(hi, lo, s, n);
      return t.toData();
    });
    const forward = new GroupTable();
    tables.forEach((d, k) => forward.addAll(d, maps[k]!));
    const backward = new GroupTable();
    [2, 1, 0].forEach((k) => backward.addAll(tables[k]!, maps[k]!));
    expect(contents(forward)).toEqual(ref);
    expect(contents(backward)).toEqual(ref);
    // Mapping classes again keeps the groups and their records.
    const before = Array.from({ length: forward.count }, (_, g) => forward.strataOf(g));
    forward.remapClasses((s) => 100 - s);
    for (let g = 0; g < forward.count; g++) expect(forward.strataOf(g)).toEqual(before[g]!.map(([s, n]) => [100 - s, n]).sort((a, b) => a[0]! - b[0]!));
  });
});
