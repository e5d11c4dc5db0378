/**
 * Per-column summaries computed in one pass, mergeable across chunks and worker threads.
 *
 * Everything kept here merges exactly and without regard to order: counts add, min/max take the
 * extreme, numeric moments are exact sums (see exact-sum.ts), value counts add, and the distinct
 * estimate (once a column has too many values to count exactly) takes the register-wise maximum.
 * So the summary of a part is the same bytes however its records were cut into pieces, which is
 * what lets a manifest stay identical for any thread count or memory budget.
 *
 * Pure: no file system, streams or threads. Fields arrive as raw byte ranges of the input (see
 * FieldKind in io/batch.ts) and are read without building strings on the numeric path.
 *
 * Type inference, per column, over its non-missing values:
 * - integer: every value is a decimal integer of at most 2^53 in magnitude (larger integers are
 *   counted as `number`, since a double cannot hold them exactly);
 * - number: every value is a decimal number (integers included); `NaN`, `Infinity` and numbers
 *   that overflow a double are text;
 * - boolean: every value is `true` or `false` (any letter case);
 * - datetime: every value is an ISO 8601 calendar date `YYYY-MM-DD`, optionally followed by
 *   `T` or a space, `HH:MM`, optional `:SS` and fraction, and an optional `Z` or `±HH:MM` offset;
 * - text: anything else, including a mix of the kinds above (other than integer with number);
 * - empty: no values at all.
 * A JSON string is read by its content, like a CSV field: `"12"` counts as a number.
 * Missing values are empty fields (also `""` and the JSON empty string) and absent/null JSON fields.
 */

import { FieldKind } from '../io/batch.js';
import type { RecordBatch } from '../io/batch.js';
import { RowdeckError } from '../errors.js';
import { ExactMoments } from './exact-sum.js';
import type { SerializedMoments } from './exact-sum.js';

export interface StatsOptions {
  /** Distinct values counted exactly (with their counts) before switching to an estimate. Default 1000. */
  distinctCap?: number;
  /** Most frequent values listed per column while the counts are exact. Default 10. */
  topValues?: number;
}

export type ColumnType = 'integer' | 'number' | 'boolean' | 'datetime' | 'text' | 'empty';

export interface ValueCount {
  value: string;
  count: number;
}

/**
 * One column of a profile or manifest. Keys always appear, in this order; `null` where a figure
 * does not apply (or was left out by `excludeValues`).
 */
export interface ColumnSummary {
  name: string;
  type: ColumnType;
  /** Non-missing values. */
  count: number;
  missing: number;
  /** Distinct non-missing values: exact, or an estimate when `approximate`. */
  distinct: number;
  approximate: boolean;
  /** Numbers for integer/number columns; text for datetime/text columns, compared by UTF-8 bytes (= code point order). */
  min: number | string | null;
  max: number | string | null;
  /** Integer/number columns only; null when a value exceeds ±2^450 (see TableStats). */
  mean: number | null;
  /** Sample standard deviation (n − 1); null for fewer than two values. */
  sd: number | null;
  /** Most frequent values, count descending then value ascending; null once approximate. */
  top: ValueCount[] | null;
}

export interface SummaryOptions {
  /**
   * Leave every data value out: min/max (of every type), top values. What stays: name, type,
   * count, missing, distinct, approximate, and mean/sd of integer/number columns with at least 3
   * values. Note that moments still say something about the values (with 3 values, mean and sd
   * bound them), so publish them only where aggregate figures are acceptable.
   */
  excludeValues?: boolean;
}

/** Serialised column state: plain JSON data. */
export interface SerializedColumn {
  count: number;
  missing: number;
  /** Non-missing values by kind: [integer, number, boolean, datetime, text]. */
  kinds: [number, number, number, number, number];
  numMin: number | null;
  numMax: number | null;
  /** Numeric values too large in magnitude for exact squares; moments are void when > 0. */
  huge: number;
  moments: SerializedMoments;
  /** Smallest and largest value bytes (as latin1 text), byte order. */
  lo: string | null;
  hi: string | null;
  /** Exact value counts, sorted by key (latin1 text of the value bytes), or null once estimated. */
  values: [string, number][] | null;
  /** Distinct-count estimator registers (base64), or null while exact. */
  sketch: string | null;
}

export interface SerializedStats {
  version: 1;
  columns: string[];
  distinctCap: number;
  topValues: number;
  records: number;
  stats: SerializedColumn[];
}

// --- value classification ----------------------------------------------------------------------

const K_INT = 0;
const K_NUM = 1;
const K_BOOL = 2;
const K_DATE = 3;
const K_TEXT = 4;

/** Exact squares stop being safe past this magnitude (x² must fit, with n·Σx², in a double). */
const HUGE = 2 ** 450;
const MAX_SAFE = Number.MAX_SAFE_INTEGER;
const POW10 = [1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22];

/**
 * Set by classifyValue() when it returns K_INT or K_NUM (avoids returning a tuple). A typed array,
 * not a `let`: a double stored in a module variable is boxed on every write, a typed array slot is not.
 */
const parsed = new Float64Array(1);

/**
 * Reads a decimal number: [+-] digits [. digits] [e [+-] digits], or [+-] . digits [e ...].
 * Up to 15 digits and no exponent: mantissa / 10^k, both exact, so the one division is correctly
 * rounded and equals Number(text) (Clinger's fast path). Otherwise falls back to Number(text).
 * Returns K_INT, K_NUM, or K_TEXT when the bytes are not such a number or overflow.
 */
function classifyNumber(b: Buffer, s: number, e: number): number {
  let i = s;
  let neg = false;
  let c = b[i]!;
  if (c === 0x2d || c === 0x2b) {
    neg = c === 0x2d;
    i++;
  }
  let mant = 0;
  let digits = 0;
  let frac = 0;
  let intDigits = 0;
  while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
    mant = mant * 10 + (c - 0x30);
    intDigits++;
    i++;
  }
  digits = intDigits;
  let dot = false;
  if (i < e && b[i] === 0x2e) {
    dot = true;
    i++;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
      mant = mant * 10 + (c - 0x30);
      frac++;
      i++;
    }
    digits += frac;
  }
  if (digits === 0) return K_TEXT;
  let exp = false;
  if (i < e && (b[i] === 0x65 || b[i] === 0x45)) {
    exp = true;
    i++;
    if (i < e && (b[i] === 0x2b || b[i] === 0x2d)) i++;
    const es = i;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) i++;
    if (i === es) return K_TEXT;
  }
  if (i !== e) return K_TEXT;
  let v: number;
  if (!exp && digits <= 15) {
    v = frac === 0 ? mant : mant / POW10[frac]!;
    if (neg) v = -v;
  } else {
    v = Number(latin1(b, s, e));
    if (!Number.isFinite(v)) return K_TEXT;
  }
  parsed[0] = v;
  return !dot && !exp && (v <= MAX_SAFE && v >= -MAX_SAFE) ? K_INT : K_NUM;
}

function latin1(b: Buffer, s: number, e: number): string {
  return b.toString('latin1', s, e);
}

function isDigit(c: number | undefined): boolean {
  return c !== undefined && c >= 0x30 && c <= 0x39;
}

function read2(b: Uint8Array, i: number): number {
  return (b[i]! - 0x30) * 10 + (b[i + 1]! - 0x30);
}

function are2Digits(b: Uint8Array, i: number, e: number): boolean {
  return i + 2 <= e && isDigit(b[i]) && isDigit(b[i + 1]);
}

const DAYS_IN_MONTH = [0, 31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

/** ISO 8601 calendar date, optionally with time and offset (see the module comment). */
function isIsoDatetime(b: Uint8Array, s: number, e: number): boolean {
  if (e - s < 10) return false;
  if (b[s + 4] !== 0x2d || b[s + 7] !== 0x2d) return false;
  if (!isDigit(b[s]) || !isDigit(b[s + 1]) || !are2Digits(b, s + 2, e) || !are2Digits(b, s + 5, e) || !are2Digits(b, s + 8, e)) return false;
  const year = (b[s]! - 0x30) * 1000 + (b[s + 1]! - 0x30) * 100 + read2(b, s + 2);
  const month = read2(b, s + 5);
  const day = read2(b, s + 8);
  if (month < 1 || month > 12 || day < 1 || day > DAYS_IN_MONTH[month]!) return false;
  if (month === 2 && day === 29 && !(year % 4 === 0 && (year % 100 !== 0 || year % 400 === 0))) return false;
  let i = s + 10;
  if (i === e) return true;
  const sep = b[i];
  if (sep !== 0x54 && sep !== 0x74 && sep !== 0x20) return false;
  i++;
  if (!are2Digits(b, i, e) || b[i + 2] !== 0x3a || !are2Digits(b, i + 3, e)) return false;
  if (read2(b, i) > 23 || read2(b, i + 3) > 59) return false;
  i += 5;
  if (i < e && b[i] === 0x3a) {
    if (!are2Digits(b, i + 1, e) || read2(b, i + 1) > 60) return false;
    i += 3;
    if (i < e && (b[i] === 0x2e || b[i] === 0x2c)) {
      const fs = ++i;
      while (i < e && isDigit(b[i])) i++;
      if (i === fs) return false;
    }
  }
  if (i === e) return true;
  const z = b[i];
  if ((z === 0x5a || z === 0x7a) && i + 1 === e) return true;
  if (z !== 0x2b && z !== 0x2d) return false;
  i++;
  if (!are2Digits(b, i, e) || read2(b, i) > 23) return false;
  i += 2;
  if (i === e) return true;
  if (b[i] === 0x3a) i++;
  return i + 2 === e && are2Digits(b, i, e) && read2(b, i) <= 59;
}

function isBoolean(b: Uint8Array, s: number, e: number): boolean {
  const n = e - s;
  if (n === 4) {
    return (b[s]! | 0x20) === 0x74 && (b[s + 1]! | 0x20) === 0x72 && (b[s + 2]! | 0x20) === 0x75 && (b[s + 3]! | 0x20) === 0x65;
  }
  if (n === 5) {
    return (
      (b[s]! | 0x20) === 0x66 && (b[s + 1]! | 0x20) === 0x61 && (b[s + 2]! | 0x20) === 0x6c &&
      (b[s + 3]! | 0x20) === 0x73 && (b[s + 4]! | 0x20) === 0x65
    );
  }
  return false;
}

/** Kind of one non-empty value; sets parsed[0] for numbers. */
function classifyValue(b: Buffer, s: number, e: number): number {
  const c = b[s]!;
  if ((c >= 0x30 && c <= 0x39) || c === 0x2d || c === 0x2b || c === 0x2e) {
    if (e - s >= 10 && b[s + 4] === 0x2d && isIsoDatetime(b, s, e)) return K_DATE;
    return classifyNumber(b, s, e);
  }
  if ((c | 0x20) === 0x74 || (c | 0x20) === 0x66) return isBoolean(b, s, e) ? K_BOOL : K_TEXT;
  return K_TEXT;
}

// --- distinct-count estimate -------------------------------------------------------------------

/** 2^12 registers: standard error about 1.04 / sqrt(4096) = 1.6 % (Flajolet et al. 2007). */
const SKETCH_BITS = 12;
const SKETCH_SIZE = 1 << SKETCH_BITS;

function mix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return (h ^ (h >>> 16)) >>> 0;
}

/** Two 32-bit lanes of the last hashValue() call (a typed array: no boxing, see `parsed`). */
const hashOut = new Uint32Array(2);

/**
 * Fixed hash of value bytes, two lanes (multiply-xorshift over 32-bit words, then a murmur3
 * finaliser each).
 * Fixed forever: sketches made by different runs and versions must merge.
 */
function hashValue(b: Uint8Array, s: number, e: number): void {
  let h1 = 0x811c9dc5 ^ (e - s);
  let h2 = 0x3c6ef372;
  let i = s;
  // Four bytes per step (little-endian word), then the tail byte by byte.
  for (const e4 = e - 3; i < e4; i += 4) {
    const w = b[i]! | (b[i + 1]! << 8) | (b[i + 2]! << 16) | (b[i + 3]! << 24);
    h1 = Math.imul(h1 ^ w, 0x01000193);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 ^ w, 0x5bd1e995);
    h2 ^= h2 >>> 13;
  }
  for (; i < e; i++) {
    const c = b[i]!;
    h1 = Math.imul(h1 ^ c, 0x01000193);
    h2 = Math.imul(h2 ^ c, 0x5bd1e995);
  }
  const a = mix32(h1);
  hashOut[0] = a;
  hashOut[1] = mix32(h2 ^ Math.imul(a, 0x9e3779b1));
}

/** Register = top 12 bits of lane A; rank = leading zeros of lane B, plus one (44 hash bits used). */
function updateSketch(reg: Uint8Array): void {
  const j = hashOut[0]! >>> (32 - SKETCH_BITS);
  const rank = Math.clz32(hashOut[1]!) + 1;
  if (rank > reg[j]!) reg[j] = rank;
}

/**
 * Exact counts of distinct values, keyed by their bytes: an open-addressing table over a byte
 * arena, so counting a value that was seen before allocates nothing.
 */
class ValueCounter {
  private arena = Buffer.alloc(1024);
  private used = 0;
  private keyStart = new Int32Array(64);
  private keyLen = new Int32Array(64);
  private keyHash = new Int32Array(64);
  private counts = new Float64Array(64);
  /** Each key's kind and parsed number, so a repeated value skips classification and min/max. */
  private keyKind = new Int32Array(64);
  private keyNumber = new Float64Array(64);
  private table = new Int32Array(128); // index + 1 of a key; 0 = empty
  /** Table slot where the last missed lookup() would insert. */
  private freeSlot = 0;
  size = 0;

  /**
   * Index of b[s, e) and one more count for it, or -1 when the value is new (then insert() may
   * follow). hashOut must hold hashValue(b, s, e).
   */
  lookup(b: Uint8Array, s: number, e: number): number {
    const len = e - s;
    const h = hashOut[0]! | 0;
    const mask = this.table.length - 1;
    let slot = h & mask;
    for (;;) {
      const k = this.table[slot]!;
      if (k === 0) break;
      const i = k - 1;
      if (this.keyHash[i] === h && this.keyLen[i] === len && this.isKeyEqual(i, b, s, len)) {
        this.counts[i] = this.counts[i]! + 1;
        return i;
      }
      slot = (slot + 1) & mask;
    }
    this.freeSlot = slot;
    return -1;
  }

  kindAt(i: number): number {
    return this.keyKind[i]!;
  }

  numberAt(i: number): number {
    return this.keyNumber[i]!;
  }

  /** Adds a value that lookup() just missed, with its count, kind and parsed number. */
  insert(b: Uint8Array, s: number, e: number, n: number, kind: number, num: number): void {
    const len = e - s;
    const i = this.size++;
    if (i >= this.counts.length) this.growEntries();
    if (this.used + len > this.arena.length) {
      const na = Buffer.alloc(Math.max(this.arena.length * 2, this.used + len));
      this.arena.copy(na, 0, 0, this.used);
      this.arena = na;
    }
    for (let q = 0; q < len; q++) this.arena[this.used + q] = b[s + q]!;
    this.keyStart[i] = this.used;
    this.keyLen[i] = len;
    this.keyHash[i] = hashOut[0]! | 0;
    this.counts[i] = n;
    this.keyKind[i] = kind;
    this.keyNumber[i] = num;
    this.used += len;
    this.table[this.freeSlot] = i + 1;
    if (this.size * 2 > this.table.length) this.growTable();
  }

  /** Adds n to the count of a value (merging, deserialising); hashOut must hold its hash. */
  add(b: Buffer, s: number, e: number, n: number): void {
    const i = this.lookup(b, s, e);
    if (i >= 0) {
      this.counts[i] = this.counts[i]! + n - 1;
      return;
    }
    const kind = classifyValue(b, s, e);
    this.insert(b, s, e, n, kind, kind <= K_NUM ? parsed[0]! : 0);
  }

  /** Calls fn with each key's bytes (arena, start, end) and count, in insertion order. */
  forEach(fn: (arena: Buffer, start: number, end: number, count: number) => void): void {
    for (let i = 0; i < this.size; i++) fn(this.arena, this.keyStart[i]!, this.keyStart[i]! + this.keyLen[i]!, this.counts[i]!);
  }

  private isKeyEqual(i: number, b: Uint8Array, s: number, len: number): boolean {
    const a = this.arena;
    const o = this.keyStart[i]!;
    for (let q = 0; q < len; q++) if (a[o + q] !== b[s + q]) return false;
    return true;
  }

  private growEntries(): void {
    const n = this.counts.length * 2;
    const grow = <T extends Int32Array | Float64Array>(old: T, fresh: T): T => {
      fresh.set(old);
      return fresh;
    };
    this.keyStart = grow(this.keyStart, new Int32Array(n));
    this.keyLen = grow(this.keyLen, new Int32Array(n));
    this.keyHash = grow(this.keyHash, new Int32Array(n));
    this.counts = grow(this.counts, new Float64Array(n));
    this.keyKind = grow(this.keyKind, new Int32Array(n));
    this.keyNumber = grow(this.keyNumber, new Float64Array(n));
  }

  private growTable(): void {
    const t = new Int32Array(this.table.length * 2);
    const mask = t.length - 1;
    for (let i = 0; i < this.size; i++) {
      let slot = this.keyHash[i]! & mask;
      while (t[slot] !== 0) slot = (slot + 1) & mask;
      t[slot] = i + 1;
    }
    this.table = t;
  }
}

function estimateDistinct(reg: Uint8Array): number {
  let sum = 0;
  let zeros = 0;
  for (let j = 0; j < SKETCH_SIZE; j++) {
    const r = reg[j]!;
    sum += 2 ** -r;
    if (r === 0) zeros++;
  }
  const m = SKETCH_SIZE;
  const alpha = 0.7213 / (1 + 1.079 / m);
  let est = (alpha * m * m) / sum;
  // Small-range correction: linear counting while registers are still empty.
  if (est <= 2.5 * m && zeros > 0) est = m * Math.log(m / zeros);
  return Math.round(est);
}

// --- per-column state --------------------------------------------------------------------------

let scratch = Buffer.allocUnsafe(256);

function ensureScratch(n: number): Buffer {
  if (scratch.length < n) scratch = Buffer.allocUnsafe(Math.max(n, scratch.length * 2));
  return scratch;
}

/** Bytes a − b in byte order (like Buffer.compare), without allocating views. */
function compareBytes(a: Uint8Array, as: number, ae: number, b: Uint8Array, bl: number): number {
  const n = Math.min(ae - as, bl);
  for (let i = 0; i < n; i++) {
    const d = a[as + i]! - b[i]!;
    if (d !== 0) return d;
  }
  return ae - as - bl;
}

class ColumnState {
  count = 0;
  missing = 0;
  readonly kinds: [number, number, number, number, number] = [0, 0, 0, 0, 0];
  numMin = Infinity;
  numMax = -Infinity;
  huge = 0;
  readonly moments = new ExactMoments();
  lo = new Uint8Array(16);
  loLen = -1; // -1: no value yet
  hi = new Uint8Array(16);
  hiLen = -1;
  values: ValueCounter | null = new ValueCounter();
  sketch: Uint8Array | null = null;

  addValue(b: Buffer, s: number, e: number, cap: number): void {
    this.count++;
    hashValue(b, s, e);
    const values = this.values;
    if (values !== null) {
      const i = values.lookup(b, s, e);
      if (i >= 0) {
        // Seen before: min/max already include it; only the counts and moments move.
        const k = values.kindAt(i);
        this.kinds[k]!++;
        if (k <= K_NUM) this.addNumber(values.numberAt(i));
        return;
      }
      const k = this.classifyNew(b, s, e);
      values.insert(b, s, e, 1, k, parsed[0]!);
      if (values.size > cap) this.switchToSketch();
    } else {
      this.classifyNew(b, s, e);
      updateSketch(this.sketch!);
    }
  }

  /** Kind counts, numeric min/max and text min/max for a value not seen before (or not tracked). */
  private classifyNew(b: Buffer, s: number, e: number): number {
    const k = classifyValue(b, s, e);
    this.kinds[k]!++;
    if (k <= K_NUM) {
      const x = parsed[0]!;
      this.numMin = Math.min(this.numMin, x); // Math.min orders -0 before 0, independent of order
      this.numMax = Math.max(this.numMax, x);
      this.addNumber(x);
    }
    const len = e - s;
    if (this.loLen < 0 || compareBytes(b, s, e, this.lo, this.loLen) < 0) {
      if (this.lo.length < len) this.lo = new Uint8Array(len * 2);
      for (let q = 0; q < len; q++) this.lo[q] = b[s + q]!;
      this.loLen = len;
    }
    if (this.hiLen < 0 || compareBytes(b, s, e, this.hi, this.hiLen) > 0) {
      if (this.hi.length < len) this.hi = new Uint8Array(len * 2);
      for (let q = 0; q < len; q++) this.hi[q] = b[s + q]!;
      this.hiLen = len;
    }
    return k;
  }

  private addNumber(x: number): void {
    if (x > HUGE || x < -HUGE) this.huge++;
    else this.moments.add(x);
  }

  switchToSketch(): void {
    const reg = this.sketch ?? new Uint8Array(SKETCH_SIZE);
    this.values?.forEach((a, s, e) => {
      hashValue(a, s, e);
      updateSketch(reg);
    });
    this.values = null;
    this.sketch = reg;
  }

  merge(o: ColumnState, cap: number): void {
    this.count += o.count;
    this.missing += o.missing;
    for (let k = 0; k < 5; k++) this.kinds[k]! += o.kinds[k]!;
    this.numMin = Math.min(this.numMin, o.numMin);
    this.numMax = Math.max(this.numMax, o.numMax);
    this.huge += o.huge;
    this.moments.merge(o.moments);
    if (o.loLen >= 0 && (this.loLen < 0 || compareBytes(o.lo, 0, o.loLen, this.lo, this.loLen) < 0)) {
      this.lo = o.lo.slice(0, Math.max(16, o.loLen));
      this.loLen = o.loLen;
    }
    if (o.hiLen >= 0 && (this.hiLen < 0 || compareBytes(o.hi, 0, o.hiLen, this.hi, this.hiLen) > 0)) {
      this.hi = o.hi.slice(0, Math.max(16, o.hiLen));
      this.hiLen = o.hiLen;
    }
    // Exact while the union of values stays within the cap; the union exceeds it (in any merge
    // order) exactly when the whole does, so the switch point cannot depend on order.
    if (this.values !== null && o.values !== null) {
      const values = this.values;
      o.values.forEach((a, s, e, n) => {
        hashValue(a, s, e);
        values.add(a, s, e, n);
      });
      if (values.size > cap) this.switchToSketch();
    } else {
      this.switchToSketch();
      const reg = this.sketch!;
      if (o.values !== null) {
        o.values.forEach((a, s, e) => {
          hashValue(a, s, e);
          updateSketch(reg);
        });
      } else {
        for (let j = 0; j < SKETCH_SIZE; j++) if (o.sketch![j]! > reg[j]!) reg[j] = o.sketch![j]!;
      }
    }
  }

  resolveType(): ColumnType {
    const [nInt, nNum, nBool, nDate, nText] = this.kinds;
    if (this.count === 0) return 'empty';
    if (nText > 0) return 'text';
    if (nInt + nNum === this.count) return nNum === 0 ? 'integer' : 'number';
    if (nBool === this.count) return 'boolean';
    if (nDate === this.count) return 'datetime';
    return 'text';
  }

  summarize(name: string, topValues: number, excludeValues: boolean): ColumnSummary {
    const type = this.resolveType();
    const numeric = type === 'integer' || type === 'number';
    let min: number | string | null = null;
    let max: number | string | null = null;
    if (!excludeValues) {
      if (numeric) {
        min = this.numMin + 0; // + 0 turns -0 into 0
        max = this.numMax + 0;
      } else if (type === 'datetime' || type === 'text') {
        min = decodeUtf8(this.lo, this.loLen);
        max = decodeUtf8(this.hi, this.hiLen);
      }
    }
    let mean: number | null = null;
    let sd: number | null = null;
    if (numeric && this.huge === 0 && (!excludeValues || this.count >= 3)) {
      mean = this.moments.mean() + 0;
      if (this.count >= 2) sd = this.moments.sd();
      if (!Number.isFinite(mean)) mean = null;
      if (sd !== null && !Number.isFinite(sd)) sd = null;
    }
    let top: ValueCount[] | null = null;
    if (this.values !== null && !excludeValues) {
      const entries: ValueCount[] = [];
      this.values.forEach((a, s, e, count) => entries.push({ value: decodeUtf8(a.subarray(s), e - s)!, count }));
      entries.sort((a, b) => b.count - a.count || (a.value < b.value ? -1 : a.value > b.value ? 1 : 0));
      top = entries.slice(0, topValues);
    }
    return {
      name,
      type,
      count: this.count,
      missing: this.missing,
      distinct: this.values !== null ? this.values.size : estimateDistinct(this.sketch!),
      approximate: this.values === null,
      min,
      max,
      mean,
      sd,
      top,
    };
  }

  toJSON(): SerializedColumn {
    let values: [string, number][] | null = null;
    if (this.values !== null) {
      const list: [string, number][] = [];
      this.values.forEach((a, s, e, n) => list.push([Buffer.from(a.buffer, a.byteOffset + s, e - s).toString('latin1'), n]));
      values = list.sort((a, b) => (a[0] < b[0] ? -1 : a[0] > b[0] ? 1 : 0));
    }
    return {
      count: this.count,
      missing: this.missing,
      kinds: [...this.kinds],
      numMin: Number.isFinite(this.numMin) ? this.numMin : null,
      numMax: Number.isFinite(this.numMax) ? this.numMax : null,
      huge: this.huge,
      moments: this.moments.toJSON(),
      lo: this.loLen < 0 ? null : Buffer.from(this.lo.subarray(0, this.loLen)).toString('latin1'),
      hi: this.hiLen < 0 ? null : Buffer.from(this.hi.subarray(0, this.hiLen)).toString('latin1'),
      values,
      sketch: this.sketch === null ? null : Buffer.from(this.sketch).toString('base64'),
    };
  }

  static fromJSON(s: SerializedColumn): ColumnState {
    const c = new ColumnState();
    c.count = s.count;
    c.missing = s.missing;
    for (let k = 0; k < 5; k++) c.kinds[k] = s.kinds[k]!;
    c.numMin = s.numMin ?? Infinity;
    c.numMax = s.numMax ?? -Infinity;
    c.huge = s.huge;
    c.moments.merge(ExactMoments.fromJSON(s.moments));
    if (s.lo !== null) {
      c.lo = new Uint8Array(Buffer.from(s.lo, 'latin1'));
      c.loLen = c.lo.length;
    }
    if (s.hi !== null) {
      c.hi = new Uint8Array(Buffer.from(s.hi, 'latin1'));
      c.hiLen = c.hi.length;
    }
    if (s.values === null) c.values = null;
    else {
      const values = new ValueCounter();
      for (const [key, n] of s.values) {
        const bytes = Buffer.from(key, 'latin1');
        hashValue(bytes, 0, bytes.length);
        values.add(bytes, 0, bytes.length, n);
      }
      c.values = values;
    }
    c.sketch = s.sketch === null ? null : new Uint8Array(Buffer.from(s.sketch, 'base64'));
    return c;
  }
}

/** True when byte c occurs in b[s, e). (Buffer#indexOf would scan past e, to the end of the batch.) */
function hasByte(b: Buffer, s: number, e: number, c: number): boolean {
  for (let i = s; i < e; i++) if (b[i] === c) return true;
  return false;
}

function decodeUtf8(b: Uint8Array, len: number): string | null {
  return len < 0 ? null : Buffer.from(b.buffer, b.byteOffset, len).toString('utf8');
}

// --- the table ---------------------------------------------------------------------------------

export class TableStats {
  readonly columns: string[];
  readonly distinctCap: number;
  readonly topValues: number;
  /** Records seen (addRecordDone calls, plus merged records). */
  records = 0;
  private readonly cols: ColumnState[];

  constructor(columns: string[], opts: StatsOptions = {}) {
    this.columns = columns.slice();
    this.distinctCap = opts.distinctCap ?? 1000;
    this.topValues = opts.topValues ?? 10;
    if (!Number.isInteger(this.distinctCap) || this.distinctCap < 0) {
      throw new RowdeckError('ERR_OPTION', `distinct cap must be a whole number >= 0, got ${this.distinctCap}.`);
    }
    this.cols = columns.map(() => new ColumnState());
  }

  /**
   * Adds one field of the current record. `data[start, end)` holds the raw field as read: for
   * CsvQuoted with its outer quotes, for JsonString as a JSON string token.
   */
  addField(col: number, data: Buffer, start: number, end: number, kind: FieldKind): void {
    const c = this.cols[col];
    if (c === undefined) throw new RowdeckError('ERR_INTERNAL', `statistics: column ${col} out of range (${this.cols.length} columns).`);
    let b: Buffer = data;
    let s = start;
    let e = end;
    if (kind === FieldKind.CsvQuoted) {
      s++;
      e--;
      // Undo "" only when one is there; most quoted fields have none.
      if (hasByte(data, s, e, 0x22)) {
        const out = ensureScratch(e - s);
        let n = 0;
        for (let i = s; i < e; i++) {
          const ch = data[i]!;
          out[n++] = ch;
          if (ch === 0x22) i++;
        }
        b = out;
        s = 0;
        e = n;
      }
    } else if (kind === FieldKind.JsonString) {
      s++;
      e--;
      if (hasByte(data, s, e, 0x5c)) {
        const text = JSON.parse(data.toString('utf8', start, end)) as string;
        const out = ensureScratch(Buffer.byteLength(text, 'utf8'));
        b = out;
        s = 0;
        e = out.write(text, 0, 'utf8');
      }
    } else if (kind === FieldKind.Missing) {
      c.missing++;
      return;
    }
    if (s >= e) {
      c.missing++;
      return;
    }
    c.addValue(b, s, e, this.distinctCap);
  }

  /** Marks the end of one record (counts it). */
  addRecordDone(): void {
    this.records++;
  }

  /**
   * Adds record i of a batch whose wanted fields are this table's columns, in order
   * (batch.wanted === columns.length).
   */
  addRecord(batch: RecordBatch, i: number): void {
    const w = batch.wanted;
    const base = i * w;
    const n = Math.min(w, this.cols.length);
    for (let f = 0; f < n; f++) {
      this.addField(f, batch.data, batch.fieldStart[base + f]!, batch.fieldEnd[base + f]!, batch.fieldKind[base + f]! as FieldKind);
    }
    this.records++;
  }

  /** Adds every record of a batch (see addRecord). */
  addBatch(batch: RecordBatch): void {
    for (let i = 0; i < batch.count; i++) this.addRecord(batch, i);
  }

  /** Folds another table's figures into this one: exact, and the result does not depend on order. */
  merge(other: TableStats): void {
    if (other.columns.length !== this.columns.length || other.columns.some((c, i) => c !== this.columns[i])) {
      throw new RowdeckError('ERR_INTERNAL', `statistics: cannot merge tables with different columns (${this.columns.join(',')} vs ${other.columns.join(',')}).`);
    }
    if (other.distinctCap !== this.distinctCap) {
      throw new RowdeckError('ERR_INTERNAL', `statistics: cannot merge tables with different distinct caps (${this.distinctCap} vs ${other.distinctCap}).`);
    }
    this.records += other.records;
    for (let i = 0; i < this.cols.length; i++) this.cols[i]!.merge(other.cols[i]!, this.distinctCap);
  }

  /** Canonical plain-data form: equal figures give deep-equal objects whatever the history. */
  toJSON(): SerializedStats {
    return {
      version: 1,
      columns: this.columns.slice(),
      distinctCap: this.distinctCap,
      topValues: this.topValues,
      records: this.records,
      stats: this.cols.map((c) => c.toJSON()),
    };
  }

  static fromJSON(s: SerializedStats): TableStats {
    if (s.version !== 1) throw new RowdeckError('ERR_INTERNAL', `statistics: unknown serialised version ${String(s.version)}.`);
    const t = new TableStats(s.columns, { distinctCap: s.distinctCap, topValues: s.topValues });
    t.records = s.records;
    for (let i = 0; i < s.stats.length; i++) t.cols[i] = ColumnState.fromJSON(s.stats[i]!);
    return t;
  }

  /** The profile/manifest form, one entry per column, keys in a fixed order. */
  summary(opts: SummaryOptions = {}): ColumnSummary[] {
    const exclude = opts.excludeValues === true;
    return this.cols.map((c, i) => c.summarize(this.columns[i]!, this.topValues, exclude));
  }
}
