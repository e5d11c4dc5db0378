/**
 * The value table of a column below the distinct cap: every distinct value's bytes with its
 * count, in an open-addressing table over a byte arena.
 */

import type { SerializedExactColumn, ValueCount } from './stats-types.js';
import { compareBytes, decodeUtf8, loadWord, ORDER_KEY_ZERO, orderKey } from './value-bytes.js';
import { classifyValue, K_NUM, parsed, parsedScale } from './value-kind.js';
import { updateSketch } from './value-sketch.js';

/** What a value table's keys are folded into: a column's accumulated figures (column-state.ts). */
export interface CountedValues {
  /** Adds `n` occurrences of one value whose classification is known. */
  addCounted(b: Buffer, s: number, e: number, n: number, kind: number, x: number, m: number, scale: number): void;
}

/**
 * Exact counts of distinct values, keyed by their bytes: an open-addressing table over a byte
 * arena, so counting a value that was seen before allocates nothing. A key costs 20 bytes besides
 * its bytes and its table slots: where its bytes start, their length and hash (one Int32Array,
 * three to a key) and its count (a Float64Array). What classifying a value finds (kind, double,
 * decimal mantissa and scale) is found again from its bytes when the table is folded into a
 * column's figures, once per key: a wide table holds a thousand keys in each of thousands of
 * columns, and two arrays to grow instead of eleven keep that memory and its allocations small.
 */
export class ValueCounter {
  private arena: Buffer;
  private used = 0;
  /** [start, length, hash] of key i at 3i. */
  private meta: Int32Array;
  private counts: Float64Array;
  private table: Int32Array; // index + 1 of a key; 0 = empty
  /** Table slot where the last missed find() would insert. */
  private freeSlot = 0;
  size = 0;

  /** Room for `keys` keys and `bytes` of their bytes before anything grows (a table read back knows both). */
  constructor(keys = 32, bytes = 256) {
    const n = Math.max(32, 2 ** Math.ceil(Math.log2(keys)));
    this.arena = Buffer.alloc(Math.max(256, bytes));
    this.meta = new Int32Array(3 * n);
    this.counts = new Float64Array(n);
    this.table = new Int32Array(2 * n);
  }

  /**
   * Index of the value b[s, s + len) with the given hash, with one more count for it; or -1 when
   * it is new (then insert() may follow).
   */
  find(hash: number, b: Uint8Array, s: number, len: number): number {
    const table = this.table;
    const mask = table.length - 1;
    const meta = this.meta;
    let slot = hash & mask;
    for (;;) {
      const k = table[slot]!;
      if (k === 0) break;
      const i = k - 1;
      if (meta[3 * i + 2] === hash && meta[3 * i + 1] === len && this.isEqual(meta[3 * i]!, b, s, len)) {
        this.counts[i] = this.counts[i]! + 1;
        return i;
      }
      slot = (slot + 1) & mask;
    }
    this.freeSlot = slot;
    return -1;
  }

  /** Inserts a new key (after a missed find()) with its count. */
  insert(hash: number, b: Uint8Array, s: number, e: number, n: number): void {
    const len = e - s;
    const i = this.size++;
    if (i === this.counts.length) this.growEntries();
    if (this.used + len > this.arena.length) {
      const na = Buffer.alloc(Math.max(this.arena.length * 2, this.used + len));
      this.arena.copy(na, 0, 0, this.used);
      this.arena = na;
    }
    const arena = this.arena;
    const at = this.used;
    for (let q = 0; q < len; q++) arena[at + q] = b[s + q]!;
    this.meta[3 * i] = at;
    this.meta[3 * i + 1] = len;
    this.meta[3 * i + 2] = hash;
    this.counts[i] = n;
    this.used += len;
    this.table[this.freeSlot] = i + 1;
    if (this.size * 2 > this.table.length) this.growTable();
  }

  /** Key i's hash, first three words (hashKey's, column-state.ts) and length, into out[0..5) (for the statistics module's table). */
  keyWords(i: number, out: Int32Array): void {
    const s = this.meta[3 * i]!;
    const e = s + this.meta[3 * i + 1]!;
    out[0] = this.meta[3 * i + 2]!;
    out[1] = s < e ? loadWord(this.arena, s, e) : 0;
    out[2] = s + 4 < e ? loadWord(this.arena, s + 4, e) : 0;
    out[3] = s + 8 < e ? loadWord(this.arena, s + 8, e) : 0;
    out[4] = e - s;
  }

  /** Empties the table, keeping its room (a table of the next part read back, see TableStats' `recycle`). */
  clear(): void {
    this.used = 0;
    this.size = 0;
    this.freeSlot = 0;
    this.table.fill(0);
  }

  /** Adds n to key i's count (counted elsewhere: the statistics module). */
  addCount(i: number, n: number): void {
    this.counts[i] = this.counts[i]! + n;
  }

  /** Adds n to the count of a value whose hash (hashKey's) is known (merging, deserialising). */
  add(hash: number, b: Buffer, s: number, e: number, n: number): void {
    const i = this.find(hash, b, s, e - s);
    if (i >= 0) {
      this.counts[i] = this.counts[i]! + n - 1;
      return;
    }
    this.insert(hash, b, s, e, n);
  }

  /** Calls fn with each key's bytes (arena, start, end), count and hash, in insertion order. */
  forEach(fn: (arena: Buffer, start: number, end: number, count: number, hash: number) => void): void {
    const meta = this.meta;
    for (let i = 0; i < this.size; i++) fn(this.arena, meta[3 * i]!, meta[3 * i]! + meta[3 * i + 1]!, this.counts[i]!, meta[3 * i + 2]!);
  }

  /**
   * The keys packed with their lengths and counts (see SerializedExactColumn): sorted by their
   * bytes when `canonical`, else in the table's order (what goes between threads, where sorting
   * thousands of columns' keys cost more than the rest of the hand-over).
   */
  serialize(canonical: boolean): SerializedExactColumn['values'] {
    const meta = this.meta;
    const arena = this.arena;
    if (!canonical) {
      const lengths = new Array<number>(this.size);
      for (let i = 0; i < this.size; i++) lengths[i] = meta[3 * i + 1]!;
      // Keys lie in the arena in insertion order, one after the other.
      return { keys: arena.toString('latin1', 0, this.used), lengths, counts: Array.from(this.counts.subarray(0, this.size)) };
    }
    // Sorted by the first 8 bytes as two order keys (see orderKey), the rest compared only where
    // those are equal: a comparison is two integer compares, not a call into Buffer.compare.
    const n = this.size;
    const k0 = new Int32Array(n);
    const k1 = new Int32Array(n);
    for (let i = 0; i < n; i++) {
      const s = meta[3 * i]!;
      const e = s + meta[3 * i + 1]!;
      k0[i] = s < e ? orderKey(loadWord(arena, s, e)) : ORDER_KEY_ZERO;
      k1[i] = s + 4 < e ? orderKey(loadWord(arena, s + 4, e)) : ORDER_KEY_ZERO;
    }
    const order = Array.from({ length: n }, (_, i) => i);
    order.sort((x, y) => {
      if (k0[x] !== k0[y]) return k0[x]! - k0[y]!;
      if (k1[x] !== k1[y]) return k1[x]! - k1[y]!;
      const xs = meta[3 * x]!;
      const ys = meta[3 * y]!;
      return compareBytes(arena, xs, xs + meta[3 * x + 1]!, arena.subarray(ys), meta[3 * y + 1]!);
    });
    const packed = Buffer.allocUnsafe(this.used);
    const lengths = new Array<number>(this.size);
    const counts = new Array<number>(this.size);
    let at = 0;
    order.forEach((i, j) => {
      const s = meta[3 * i]!;
      const len = meta[3 * i + 1]!;
      arena.copy(packed, at, s, s + len);
      at += len;
      lengths[j] = len;
      counts[j] = this.counts[i]!;
    });
    return { keys: packed.toString('latin1', 0, at), lengths, counts };
  }

  /**
   * The `k` most frequent values, by count descending, ties by value in code-unit order. Only the
   * keys counted at least as often as the k-th most frequent are decoded and sorted.
   */
  top(k: number): ValueCount[] {
    const n = this.size;
    if (k <= 0 || n === 0) return [];
    let least = 0;
    if (n > k) {
      const c = this.counts.slice(0, n).sort();
      least = c[n - k]!;
    }
    const meta = this.meta;
    const entries: ValueCount[] = [];
    for (let i = 0; i < n; i++) {
      const count = this.counts[i]!;
      if (count < least) continue;
      const s = meta[3 * i]!;
      entries.push({ value: decodeUtf8(this.arena.subarray(s), meta[3 * i + 1]!)!, count });
    }
    entries.sort((a, b) => b.count - a.count || (a.value < b.value ? -1 : a.value > b.value ? 1 : 0));
    return entries.slice(0, k);
  }

  /** Adds every key's hash to a distinct-count sketch. */
  addToSketch(reg: Uint8Array): void {
    for (let i = 0; i < this.size; i++) updateSketch(reg, this.meta[3 * i + 2]!);
  }

  /** Folds every key, with its count, into a column's accumulated figures (classifying each key again). */
  foldInto(c: CountedValues): void {
    const meta = this.meta;
    const arena = this.arena;
    for (let i = 0; i < this.size; i++) {
      const s = meta[3 * i]!;
      const e = s + meta[3 * i + 1]!;
      const kind = classifyValue(arena, s, e);
      const numeric = kind <= K_NUM;
      c.addCounted(arena, s, e, this.counts[i]!, kind, numeric ? parsed[0]! : 0, numeric ? parsed[1]! : 0, numeric ? parsedScale[0]! : -1);
    }
  }

  /** b[s, s + len) equals the len bytes at arena[at]. */
  private isEqual(at: number, b: Uint8Array, s: number, len: number): boolean {
    const a = this.arena;
    for (let q = 0; q < len; q++) if (a[at + q] !== b[s + q]) return false;
    return true;
  }

  private growEntries(): void {
    const n = this.counts.length * 2;
    const meta = new Int32Array(3 * n);
    meta.set(this.meta);
    this.meta = meta;
    const counts = new Float64Array(n);
    counts.set(this.counts);
    this.counts = counts;
  }

  private growTable(): void {
    const t = new Int32Array(this.table.length * 2);
    const mask = t.length - 1;
    const meta = this.meta;
    for (let i = 0; i < this.size; i++) {
      let slot = meta[3 * i + 2]! & mask;
      while (t[slot] !== 0) slot = (slot + 1) & mask;
      t[slot] = i + 1;
    }
    this.table = t;
  }
}
