/**
 * The groups table of --group against a plain Map of Maps (the reference): lists of groups, as
 * buckets give them, joined in order (through the census file), with mixed classes and classes
 * listed more than once.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { GroupTable, GroupTableData } from '../src/core/group-table.js';
import { GroupTableBuilder } from '../src/engine/group-census.js';
import { createRandom } from './helpers/engine.js';

/** A bucket's list: `count` groups, each with a first class and sometimes others. */
function makeList(rnd: () => number, count: number, classes: number, ref: Map<string, Map<number, number>>): GroupTableData {
  const d: GroupTableData = { count, hi: new Uint32Array(count), lo: new Uint32Array(count), records: new Float64Array(count), first: new Int32Array(count), extra: new Float64Array(0) };
  const extra: number[] = [];
  for (let g = 0; g < count; g++) {
    d.hi[g] = Math.floor(rnd() * 2 ** 32);
    d.lo[g] = Math.floor(rnd() * 2 ** 32);
    d.first[g] = Math.floor(rnd() * classes);
    const firstRecords = 1 + Math.floor(rnd() * 5);
    const m = new Map<number, number>([[d.first[g]!, firstRecords]]);
    d.records[g] = firstRecords;
    if (rnd() < 0.3) {
      for (let k = 0; k < 3; k++) {
        const s = Math.floor(rnd() * classes);
        if (s === d.first[g]) continue;
        const n = 1 + Math.floor(rnd() * 4);
        extra.push(g, s, n);
        d.records[g]! += n;
        m.set(s, (m.get(s) ?? 0) + n);
      }
    }
    ref.set(`${d.hi[g]}:${d.lo[g]}`, m);
  }
  d.extra = Float64Array.from(extra);
  return d;
}

let dir = '';
beforeAll(() => void (dir = mkdtempSync(join(tmpdir(), 'rowdeck-groups-'))));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

/** The lists joined by a GroupTableBuilder, added in the order given (list indices). */
function joined(lists: GroupTableData[], order = lists.map((_, k) => k)): GroupTable {
  const b = new GroupTableBuilder(join(dir, 'census.bin'));
  for (const k of order) b.add(k, lists[k]!);
  return b.build();
}

describe('GroupTable', () => {
  it('joins the lists in order, each group with its records and classes, classes in increasing order', () => {
    const rnd = createRandom(9);
    const ref = new Map<string, Map<number, number>>();
    const lists = [0, 300, 1, 2000, 0, 57].map((n) => makeList(rnd, n, 6, ref));
    const t = joined(lists);
    expect(t.count).toBe(2358);
    // In the order given: list by list, group by group.
    const keys = lists.flatMap((d) => Array.from({ length: d.count }, (_, g) => `${d.hi[g]}:${d.lo[g]}`));
    expect(Array.from({ length: t.count }, (_, g) => `${t.hi[g]}:${t.lo[g]}`)).toEqual(keys);
    let several = 0;
    for (let g = 0; g < t.count; g++) {
      const list = t.strataOf(g);
      expect(new Map(list)).toEqual(ref.get(`${t.hi[g]}:${t.lo[g]}`));
      expect(list.map(([s]) => s)).toEqual([...list.map(([s]) => s)].sort((a, b) => a - b));
      expect(list.reduce((a, [, n]) => a + n, 0)).toBe(t.records[g]);
      if (list.length > 1) several++;
    }
    // The test of the test: many groups hold several classes, and one class listed twice adds up.
    expect(several).toBeGreaterThan(300);
  });
});

describe('GroupTableBuilder', () => {
  it('gives the same table whatever order the lists come in (each is written once its turn comes)', () => {
    const rnd = createRandom(17);
    const ref = new Map<string, Map<number, number>>();
    const lists = [120, 0, 3000, 1, 45, 0, 700].map((n) => makeList(rnd, n, 5, ref));
    const t = joined(lists, [3, 0, 6, 1, 5, 2, 4]);
    const want = joined(lists);
    expect(t.count).toBe(3866);
    expect(Array.from(t.hi)).toEqual(Array.from(want.hi));
    expect(Array.from(t.lo)).toEqual(Array.from(want.lo));
    expect(Array.from(t.records)).toEqual(Array.from(want.records));
    expect(Array.from(t.first)).toEqual(Array.from(want.first));
    for (let g = 0; g < t.count; g++) expect(t.strataOf(g)).toEqual(want.strataOf(g));
    expect(existsSync(join(dir, 'census.bin'))).toBe(false);
    // A list that never comes is an error, and the file goes either way.
    const c = new GroupTableBuilder(join(dir, 'census.bin'));
    c.add(1, lists[1]!);
    expect(() => c.build()).toThrow(/bucket 0 never came back/);
    expect(existsSync(join(dir, 'census.bin'))).toBe(false);
  });
});
