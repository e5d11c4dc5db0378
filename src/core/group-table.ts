/**
 * The groups of `--group`: for each distinct 64-bit group key, its records and their classes, in
 * typed arrays (about 30 bytes a group). A group of sessions or users may number in the
 * millions, and an object and a Map per group took ~1.8 KB each, once the stage-1 tasks, the
 * merge and the placement had each made their own (3.7 GiB for the 2.15 M groups of a 200 MB file).
 *
 * A group's records are usually of one class (the stratify column seldom varies within a
 * person or device): that class is `first[g]`, and the counts of any other classes are kept
 * aside in `extra`, so one class costs nothing more. `strataOf` lists a group's classes in
 * increasing order of id, whatever order the records came in, so a placement that adds them
 * up does the same arithmetic whichever thread saw which record.
 */
import { RowdeckError } from '../errors.js';

/** Plain form of a table, as a worker thread posts it. */
export interface GroupTableData {
  count: number;
  hi: Uint32Array;
  lo: Uint32Array;
  records: Float64Array;
  first: Int32Array;
  /** [group, stratum, records, …] for the classes other than each group's first. */
  extra: Float64Array;
}

export class GroupTable {
  count = 0;
  hi: Uint32Array;
  lo: Uint32Array;
  records: Float64Array;
  first: Int32Array;
  /** Group -> (class other than its first -> records). */
  readonly extra = new Map<number, Map<number, number>>();
  #slots: Int32Array;
  #bits: number;

  constructor(capacity = 1024) {
    let bits = 4;
    while (2 ** bits < 2 * capacity) bits++;
    this.#bits = bits;
    this.#slots = new Int32Array(2 ** bits);
    const n = Math.max(16, capacity);
    this.hi = new Uint32Array(n);
    this.lo = new Uint32Array(n);
    this.records = new Float64Array(n);
    this.first = new Int32Array(n);
  }

  /**
   * Lets the key index go (a quarter to a third of the table's memory): afterwards the groups
   * can be read, and their classes mapped, but no group added or looked up.
   */
  seal(): void {
    this.#slots = new Int32Array(0);
  }

  /** Adds `n` records of class `s` to the group with key (hi, lo); returns the group's index. */
  add(hi: number, lo: number, s: number, n: number): number {
    const g = this.#find(hi, lo);
    this.records[g]! += n;
    if (this.first[g] === -1) this.first[g] = s;
    else if (this.first[g] !== s) {
      let m = this.extra.get(g);
      if (!m) this.extra.set(g, (m = new Map()));
      m.set(s, (m.get(s) ?? 0) + n);
    }
    return g;
  }

  /** Index of the group with key (hi, lo), or -1. */
  indexOf(hi: number, lo: number): number {
    if (this.#slots.length === 0) throw new RowdeckError('ERR_INTERNAL', 'a group looked up in a sealed group table');
    const mask = this.#slots.length - 1;
    let slot = this.#slotOf(hi, lo);
    for (;;) {
      const k = this.#slots[slot]!;
      if (k === 0) return -1;
      if (this.hi[k - 1] === hi && this.lo[k - 1] === lo) return k - 1;
      slot = (slot + 1) & mask;
    }
  }

  /** Group g's classes and their records, in increasing order of class. */
  strataOf(g: number): [number, number][] {
    const m = this.extra.get(g);
    if (!m) return [[this.first[g]!, this.records[g]!]];
    let others = 0;
    for (const n of m.values()) others += n;
    const out: [number, number][] = [...m];
    if (this.records[g]! - others > 0) out.push([this.first[g]!, this.records[g]! - others]);
    return out.sort((a, b) => a[0] - b[0]);
  }

  /** Plain data for postMessage (copies of the used part of each array). */
  toData(): GroupTableData {
    const extra: number[] = [];
    for (const [g, m] of this.extra) for (const [s, n] of m) extra.push(g, s, n);
    const n = this.count;
    return { count: n, hi: this.hi.slice(0, n), lo: this.lo.slice(0, n), records: this.records.slice(0, n), first: this.first.slice(0, n), extra: Float64Array.from(extra) };
  }

  /** Adds another table's groups, with its class ids mapped by `classOf`. */
  addAll(d: GroupTableData, classOf: (s: number) => number): void {
    const othersOf = new Float64Array(d.count);
    for (let j = 0; j < d.extra.length; j += 3) othersOf[d.extra[j]!]! += d.extra[j + 2]!;
    for (let g = 0; g < d.count; g++) {
      const firstRecords = d.records[g]! - othersOf[g]!;
      if (firstRecords > 0) this.add(d.hi[g]!, d.lo[g]!, classOf(d.first[g]!), firstRecords);
    }
    for (let j = 0; j < d.extra.length; j += 3) {
      const g = d.extra[j]!;
      this.add(d.hi[g]!, d.lo[g]!, classOf(d.extra[j + 1]!), d.extra[j + 2]!);
    }
  }

  /** Maps every class id by `classOf` (e.g. to dealing order), in place. */
  remapClasses(classOf: (s: number) => number): void {
    for (let g = 0; g < this.count; g++) this.first[g] = classOf(this.first[g]!);
    for (const [g, m] of this.extra) this.extra.set(g, new Map([...m].map(([s, n]) => [classOf(s), n])));
  }

  #slotOf(hi: number, lo: number): number {
    // Keys are keyed hashes already; Fibonacci hashing of both words spreads them over the slots.
    return (Math.imul(lo ^ Math.imul(hi, 0x85ebca77), 0x9e3779b1) >>> (32 - this.#bits)) & (this.#slots.length - 1);
  }

  #find(hi: number, lo: number): number {
    if (this.#slots.length === 0) throw new RowdeckError('ERR_INTERNAL', 'a group added to a sealed group table');
    const mask = this.#slots.length - 1;
    let slot = this.#slotOf(hi, lo);
    for (;;) {
      const k = this.#slots[slot]!;
      if (k === 0) break;
      if (this.hi[k - 1] === hi && this.lo[k - 1] === lo) return k - 1;
      slot = (slot + 1) & mask;
    }
    const g = this.count++;
    if (g === this.hi.length) this.#growArrays();
    this.hi[g] = hi;
    this.lo[g] = lo;
    this.records[g] = 0;
    this.first[g] = -1;
    if (2 * this.count > this.#slots.length) this.#growSlots();
    else this.#slots[slot] = g + 1;
    return g;
  }

  #growArrays(): void {
    const n = this.hi.length * 2;
    if (n > 2 ** 31) throw new RowdeckError('ERR_OPTION', 'More than 2^30 distinct --group values: group by a coarser column.');
    const grow = <T extends Uint32Array | Float64Array | Int32Array>(a: T, b: T): T => (b.set(a), b);
    this.hi = grow(this.hi, new Uint32Array(n));
    this.lo = grow(this.lo, new Uint32Array(n));
    this.records = grow(this.records, new Float64Array(n));
    this.first = grow(this.first, new Int32Array(n));
  }

  /** Twice the slots, every group placed again (the newest one included). */
  #growSlots(): void {
    this.#bits++;
    this.#slots = new Int32Array(2 ** this.#bits);
    const mask = this.#slots.length - 1;
    for (let g = 0; g < this.count; g++) {
      let slot = this.#slotOf(this.hi[g]!, this.lo[g]!);
      while (this.#slots[slot] !== 0) slot = (slot + 1) & mask;
      this.#slots[slot] = g + 1;
    }
  }
}
