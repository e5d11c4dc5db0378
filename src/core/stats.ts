/**
 * Per-column summaries computed in one pass, mergeable across chunks and worker threads.
 *
 * Everything kept here merges exactly and without regard to order: counts add, min/max take the
 * extreme, numeric moments are exact sums (see exact-sum.ts), value counts add, and the distinct
 * estimate (once a column has too many values to count exactly) takes the register-wise maximum.
 * So the summary of a part is the same bytes however its records were cut into pieces, which is
 * what lets a manifest stay identical for any thread count or memory budget.
 *
 * Numbers of up to 15 significant digits are summed at their decimal value (m / 10^k, as exact
 * integer sums per scale k, see DecimalSums), longer ones at their nearest double (ExactMoments);
 * mean and variance are each rounded once from the exact total.
 *
 * Pure: no file system, streams or threads. Fields arrive as raw byte ranges of the input (see
 * FieldKind in io/batch.ts) and are read without building strings on the numeric path.
 *
 * Speed (bench/micro/stats.mjs): a batch is read column by column; a value already in a column's
 * table costs one hash and one lookup; past the distinct cap, one pass over a number's bytes
 * classifies and parses it, and a column whose type is already decided as text skips that too.
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
import { computeMeanVariance, DecimalSums, ExactMoments } from './exact-sum.js';
import type { SerializedDecimals, SerializedMoments } from './exact-sum.js';
import { EXACT_KEY_LIMIT, SLOT_VALUES, StatsKernel, type SlotFigures } from './stats-kernel.js';

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

/**
 * Serialised column state: plain JSON data. Below the distinct cap the value table is the whole
 * state (every figure derives from it), so only it is kept, packed: all keys' bytes in one latin1
 * string, with their lengths and counts; sorted by key in toJSON(), in the table's order in
 * toTransfer(). (A pair of a string and a count for each value took ~100 bytes of heap: 2,000
 * columns of a few hundred values came to ~80 MB.)
 */
export type SerializedColumn = SerializedExactColumn | SerializedEstimatedColumn;

export interface SerializedExactColumn {
  count: number;
  missing: number;
  values: {
    /** Every key's bytes, one after the other, as latin1 text. */
    keys: string;
    lengths: number[];
    counts: number[];
  };
}

export interface SerializedEstimatedColumn {
  count: number;
  missing: number;
  values: null;
  /** Non-missing values by kind: [integer, number, boolean, datetime, text]. */
  kinds: [number, number, number, number, number];
  numMin: number | null;
  numMax: number | null;
  /** Numeric values too large in magnitude for exact squares; moments are void when > 0. */
  huge: number;
  /** Σx, Σx² of the numbers summed as doubles (more than 15 significant digits). */
  moments: SerializedMoments;
  /** Σm, Σm² per decimal scale of the numbers summed as decimals. */
  decimals: SerializedDecimals;
  /** Smallest and largest value bytes (as latin1 text), byte order. */
  lo: string | null;
  hi: string | null;
  /** Distinct-count estimator registers (base64). */
  sketch: string;
}

export interface SerializedStats {
  version: 2;
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
/** Significant digits a decimal may have to be summed as one (its mantissa stays below 2^50). */
const DECIMAL_DIGITS = 15;

/**
 * Set by classifyValue() when it returns K_INT or K_NUM (avoids returning a tuple): [0] the value
 * as a double, [1] its decimal mantissa m (value = m / 10^scale) when `parsedScale[0]` >= 0. Typed
 * arrays, not `let`s: a double stored in a module variable is boxed on every write, a slot is not.
 */
const parsed = new Float64Array(2);
/** Decimal scale k of the last number read, or -1 when it is summed as a double instead. */
const parsedScale = new Int32Array(1);

/**
 * Reads a decimal number: [+-] digits [. digits] [e [+-] digits], or [+-] . digits [e ...], in
 * one pass over its bytes, without allocating.
 * - Up to 15 significant digits at a scale k (digits after the point, less the exponent) of 0..22:
 *   a decimal m / 10^k, summed exactly as such (see DecimalSums); its double is m / 10^k or
 *   m · 10^-k, both operands exact, so the one operation is correctly rounded and equals
 *   Number(text) (Clinger's fast path).
 * - Anything longer: Number(text), summed as that double (see ExactMoments).
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
  let sig = 0; // significant digits (leading zeros not counted)
  let digits = 0;
  let frac = 0;
  while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
    mant = mant * 10 + (c - 0x30);
    if (mant !== 0) sig++;
    digits++;
    i++;
  }
  let dot = false;
  if (i < e && b[i] === 0x2e) {
    dot = true;
    i++;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
      mant = mant * 10 + (c - 0x30);
      if (mant !== 0) sig++;
      frac++;
      i++;
    }
    digits += frac;
  }
  if (digits === 0) return K_TEXT;
  let exp = false;
  let ev = 0;
  if (i < e && (b[i] === 0x65 || b[i] === 0x45)) {
    exp = true;
    i++;
    let eneg = false;
    if (i < e && (b[i] === 0x2b || b[i] === 0x2d)) eneg = b[i++] === 0x2d;
    const es = i;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
      if (ev < 100000) ev = ev * 10 + (c - 0x30);
      i++;
    }
    if (i === es) return K_TEXT;
    if (eneg) ev = -ev;
  }
  if (i !== e) return K_TEXT;
  const k = frac - ev;
  let v: number;
  if (sig <= DECIMAL_DIGITS && k >= 0 && k <= 22) {
    v = k === 0 ? mant : mant / POW10[k]!;
    parsed[1] = neg ? -mant : mant;
    parsedScale[0] = k;
  } else if (sig + (-k) <= DECIMAL_DIGITS && k < 0) {
    // A whole number below 10^15 written with an exponent: m · 10^-k exactly.
    mant *= POW10[-k]!;
    v = mant;
    parsed[1] = neg ? -mant : mant;
    parsedScale[0] = 0;
  } else {
    v = Number(b.toString('latin1', s, e));
    if (!Number.isFinite(v)) return K_TEXT;
    parsedScale[0] = -1;
    neg = false;
  }
  parsed[0] = neg ? -v : v;
  return !dot && !exp && (v <= MAX_SAFE && v >= -MAX_SAFE) ? K_INT : K_NUM;
}

/** Value of the two ASCII digits b[i], b[i + 1] (both within the value), or -1 when not digits. */
function readTwoDigits(b: Uint8Array, i: number): number {
  const x = b[i]! - 0x30;
  const y = b[i + 1]! - 0x30;
  return x >= 0 && x <= 9 && y >= 0 && y <= 9 ? x * 10 + y : -1;
}

const DAYS_IN_MONTH = [0, 31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

/**
 * ISO 8601 calendar date `YYYY-MM-DD`, optionally followed by `T`/`t`/space, `HH:MM`, optional
 * `:SS` (up to 60, a leap second) with an optional `.` or `,` fraction, and an optional `Z` or
 * `±HH[:]MM` / `±HH` offset. Lengths are checked before each read, so no read leaves the value.
 */
function isIsoDatetime(b: Uint8Array, s: number, e: number): boolean {
  const n = e - s;
  if (n < 10 || b[s + 4] !== 0x2d || b[s + 7] !== 0x2d) return false;
  const century = readTwoDigits(b, s);
  const yy = readTwoDigits(b, s + 2);
  const month = readTwoDigits(b, s + 5);
  const day = readTwoDigits(b, s + 8);
  if (century < 0 || yy < 0 || month < 1 || month > 12 || day < 1 || day > DAYS_IN_MONTH[month]!) return false;
  if (month === 2 && day === 29) {
    const year = century * 100 + yy;
    if (!(year % 4 === 0 && (year % 100 !== 0 || year % 400 === 0))) return false;
  }
  if (n === 10) return true;
  const sep = b[s + 10];
  if ((sep !== 0x54 && sep !== 0x74 && sep !== 0x20) || n < 16 || b[s + 13] !== 0x3a) return false;
  const hh = readTwoDigits(b, s + 11);
  const mm = readTwoDigits(b, s + 14);
  if (hh < 0 || hh > 23 || mm < 0 || mm > 59) return false;
  let i = s + 16;
  if (i < e && b[i] === 0x3a) {
    if (i + 3 > e) return false;
    const ss = readTwoDigits(b, i + 1);
    if (ss < 0 || ss > 60) return false;
    i += 3;
    if (i < e && (b[i] === 0x2e || b[i] === 0x2c)) {
      const fs = ++i;
      while (i < e && b[i]! >= 0x30 && b[i]! <= 0x39) i++;
      if (i === fs) return false;
    }
  }
  if (i === e) return true;
  const z = b[i];
  if ((z === 0x5a || z === 0x7a) && i + 1 === e) return true;
  if (z !== 0x2b && z !== 0x2d) return false;
  i++;
  if (i + 2 > e) return false;
  const oh = readTwoDigits(b, i);
  if (oh < 0 || oh > 23) return false;
  i += 2;
  if (i === e) return true;
  if (b[i] === 0x3a) i++;
  if (i + 2 !== e) return false;
  const om = readTwoDigits(b, i);
  return om >= 0 && om <= 59;
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

/** Kind of one non-empty value; sets parsed/parsedScale for numbers. */
function classifyValue(b: Buffer, s: number, e: number): number {
  const c = b[s]!;
  if ((c >= 0x30 && c <= 0x39) || c === 0x2d || c === 0x2b || c === 0x2e) {
    if (e - s >= 10 && b[s + 4] === 0x2d && isIsoDatetime(b, s, e)) return K_DATE;
    return classifyNumber(b, s, e);
  }
  if ((c | 0x20) === 0x74 || (c | 0x20) === 0x66) return isBoolean(b, s, e) ? K_BOOL : K_TEXT;
  return K_TEXT;
}

/**
 * Bit of a kind in a column's set of kinds seen: integers and numbers share one (they widen to
 * number), so the type is decided as text as soon as the set has the text bit or two bits.
 */
const KIND_BIT = [1, 1, 2, 4, 8];

function isTextFor(kindBits: number): boolean {
  return (kindBits & 8) !== 0 || (kindBits & (kindBits - 1)) !== 0;
}

// --- distinct-count estimate -------------------------------------------------------------------

/** 2^12 registers: standard error about 1.04 / sqrt(4096) = 1.6 % (Flajolet et al. 2007). */
const SKETCH_BITS = 12;
const SKETCH_SIZE = 1 << SKETCH_BITS;

/**
 * Hash of a value's bytes, fixed (sketches of different threads and runs must merge): the bytes
 * as 32-bit little-endian words, the last one zero-padded, each mixed in by multiply-xorshift,
 * seeded with the length, then murmur3's finaliser. Its top 12 bits pick the sketch register; a
 * second finalisation of it gives the rank bits (see updateSketch).
 *
 * The first three words are also the statistics module's key for values of up to 12 bytes (most
 * values): equal words and length mean equal bytes (see ValueCounter.keyWords).
 */
function mix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

const HASH_SEED = 0x811c9dc5;
const HASH_MUL = 0x9e3779b1;
/** Masks that keep the low n bytes of a word, n = 0..3. */
const LOW_BYTES = Int32Array.of(0, 0xff, 0xffff, 0xffffff);

/** Output of hashKey(): [hash, word 0, word 1, word 2] (a typed array: no boxing, see `parsed`). */
const keyOut = new Int32Array(4);

/** Little-endian word of b[i, min(i + 4, e)), zero-padded, byte by byte. */
function loadWord(b: Uint8Array, i: number, e: number): number {
  let w = b[i]!;
  if (i + 1 < e) w |= b[i + 1]! << 8;
  if (i + 2 < e) w |= b[i + 2]! << 16;
  if (i + 3 < e) w |= b[i + 3]! << 24;
  return w;
}

/**
 * A little-endian word of up to 4 bytes (zero-padded) turned into an int32 whose signed order is
 * the bytes' order: byte-swapped to big-endian, sign bit flipped. Zero padding sorts a shorter
 * value first, as a prefix does; equal keys leave the order to the remaining bytes.
 */
function orderKey(w: number): number {
  return ((w << 24) | ((w & 0xff00) << 8) | ((w >>> 8) & 0xff00) | (w >>> 24)) ^ 0x80000000;
}

/** orderKey(0): the key of bytes past a value's end. */
const ORDER_KEY_ZERO = 0x80000000 | 0;

/** The hash and first three words of b[s, e) into keyOut (the general path; see ColumnState.addValue). */
function hashKey(b: Uint8Array, s: number, e: number): void {
  const len = e - s;
  let h = HASH_SEED ^ len;
  let w0 = 0;
  let w1 = 0;
  let w2 = 0;
  let i = s;
  let k = 0;
  // Whole words by one load each (the last, partial one below), through a cached view; a small
  // one-off buffer (say, a value decoded from JSON) is read byte by byte instead of making a view.
  if (len >= 4 && (b === viewBuffer || b === otherBuffer || b.length >= 4096)) {
    const d = b === viewBuffer ? view : getView(b);
    for (const e4 = e - 3; i < e4; i += 4, k++) {
      const w = d.getInt32(i, true);
      if (k === 0) w0 = w;
      else if (k === 1) w1 = w;
      else if (k === 2) w2 = w;
      h = Math.imul(h ^ w, HASH_MUL);
      h ^= h >>> 15;
    }
  }
  for (; i < e; i += 4, k++) {
    const w = loadWord(b, i, e);
    if (k === 0) w0 = w;
    else if (k === 1) w1 = w;
    else if (k === 2) w2 = w;
    h = Math.imul(h ^ w, HASH_MUL);
    h ^= h >>> 15;
  }
  keyOut[0] = mix32(h);
  keyOut[1] = w0;
  keyOut[2] = w1;
  keyOut[3] = w2;
}

/** Register = top 12 bits of the hash; rank = leading zeros of a second finalisation, plus one. */
function updateSketch(reg: Uint8Array, hash: number): void {
  const j = hash >>> (32 - SKETCH_BITS);
  const rank = Math.clz32(mix32(hash ^ 0x5bd1e995)) + 1;
  if (rank > reg[j]!) reg[j] = rank;
}

/**
 * DataViews over the buffers values are read from, kept while the same buffers come back: the
 * batch's data, and the scratch buffer unquoted values are copied to (they alternate).
 */
let viewBuffer: Uint8Array | null = null;
let view: DataView<ArrayBufferLike> = new DataView(new ArrayBuffer(8));
let otherBuffer: Uint8Array | null = null;
let otherView: DataView<ArrayBufferLike> = view;

function getView(b: Uint8Array): DataView<ArrayBufferLike> {
  if (b !== viewBuffer) {
    // Swap the two slots; make a view only for a buffer seen in neither.
    const ob = otherBuffer;
    const ov = otherView;
    otherBuffer = viewBuffer;
    otherView = view;
    if (b === ob) view = ov;
    else view = new DataView(b.buffer, b.byteOffset, b.byteLength);
    viewBuffer = b;
  }
  return view;
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
class ValueCounter {
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

  /** Key i's hash, first three words (hashKey's) and length, into out[0..5) (for the statistics module's table). */
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

  /** Adds n to the count of a value (merging, deserialising). */
  add(b: Buffer, s: number, e: number, n: number): void {
    hashKey(b, s, e);
    const h = keyOut[0]!;
    const i = this.find(h, b, s, e - s);
    if (i >= 0) {
      this.counts[i] = this.counts[i]! + n - 1;
      return;
    }
    this.insert(h, b, s, e, n);
  }

  /** Adds the counts of a serialised table (its keys' bytes in `bytes`). */
  addPacked(bytes: Buffer, packed: SerializedExactColumn['values']): void {
    const { lengths, counts } = packed;
    for (let i = 0, at = 0; i < lengths.length; at += lengths[i]!, i++) this.add(bytes, at, at + lengths[i]!, counts[i]!);
  }

  /** Calls fn with each key's bytes (arena, start, end) and count, in insertion order. */
  forEach(fn: (arena: Buffer, start: number, end: number, count: number) => void): void {
    const meta = this.meta;
    for (let i = 0; i < this.size; i++) fn(this.arena, meta[3 * i]!, meta[3 * i]! + meta[3 * i + 1]!, this.counts[i]!);
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
  foldInto(c: ColumnState): void {
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

/**
 * One column's figures. Two modes:
 * - exact (`values` set): every value sits in the value table with its count and what classifying
 *   it found; a repeated value costs a hash and a lookup. Kinds, min/max and moments are derived
 *   from the table when they are read (figures()).
 * - estimated (`values` null, past the distinct cap): the table has been folded into the
 *   accumulators below, and each further value is classified and added to them, and its hash to
 *   the distinct-count sketch.
 * Once the values seen decide the type as text (a text value, or two kinds that do not widen into
 * one), numeric figures can no longer be reported: they are dropped and no longer gathered, and the
 * kind counts collapse to "all text". That keeps the state canonical (a function of the values
 * only), whatever the order in which it was reached.
 */
class ColumnState {
  count = 0;
  missing = 0;
  values: ValueCounter | null;
  sketch: Uint8Array | null = null;
  // Figures of the values not held in `values`.
  readonly kinds = new Float64Array(5);
  /** KIND_BIT of every kind counted in `kinds`. */
  kindBits = 0;
  /** The type is decided: text. Numeric figures are empty and stay so. */
  text = false;
  numMin = Infinity;
  numMax = -Infinity;
  /** Numeric values too large in magnitude for exact squares; moments are void when > 0. */
  huge = 0;
  /** Made when a number is first added (an exact-mode column derives its figures from its table). */
  #dec: DecimalSums | null = null;
  #bin: ExactMoments | null = null;
  lo = new Uint8Array(16);
  loLen = -1; // -1: no value yet
  hi = new Uint8Array(16);
  hiLen = -1;
  /** First 8 bytes of lo and hi as two ordered keys each (see orderKey): most values are decided by them. */
  loK0 = 0;
  loK1 = 0;
  hiK0 = 0;
  hiK1 = 0;

  /** `values`: an empty value table to count in (one recycled, with room already made). */
  constructor(exact = true, values?: ValueCounter) {
    this.values = exact ? (values ?? new ValueCounter()) : null;
  }

  get dec(): DecimalSums {
    return (this.#dec ??= new DecimalSums());
  }

  set dec(d: DecimalSums | null) {
    this.#dec = d;
  }

  get bin(): ExactMoments {
    return (this.#bin ??= new ExactMoments());
  }

  set bin(b: ExactMoments | null) {
    this.#bin = b;
  }

  addValue(b: Buffer, s: number, e: number, cap: number): void {
    this.count++;
    const len = e - s;
    let hash: number;
    let w0 = 0;
    let w1 = 0;
    let w2 = 0;
    if (len <= 12 && e + 3 <= b.length && (b === viewBuffer || b.length >= 4096 || b === otherBuffer)) {
      // Short value, room to read whole words: at most three loads (hashKey, unrolled).
      const d = b === viewBuffer ? view : getView(b);
      let h = HASH_SEED ^ len;
      w0 = d.getInt32(s, true);
      if (len < 4) w0 &= LOW_BYTES[len]!;
      h = Math.imul(h ^ w0, HASH_MUL);
      h ^= h >>> 15;
      if (len > 4) {
        w1 = d.getInt32(s + 4, true);
        if (len < 8) w1 &= LOW_BYTES[len - 4]!;
        h = Math.imul(h ^ w1, HASH_MUL);
        h ^= h >>> 15;
        if (len > 8) {
          w2 = d.getInt32(s + 8, true);
          if (len < 12) w2 &= LOW_BYTES[len - 8]!;
          h = Math.imul(h ^ w2, HASH_MUL);
          h ^= h >>> 15;
        }
      }
      hash = mix32(h);
    } else {
      hashKey(b, s, e);
      hash = keyOut[0]!;
      w0 = keyOut[1]!;
      w1 = keyOut[2]!;
      w2 = keyOut[3]!;
    }
    const values = this.values;
    if (values !== null) {
      if (values.find(hash, b, s, len) < 0) this.insertValue(values, hash, b, s, e, cap);
      return;
    }
    this.addEstimated(hash, w0, w1, b, s, e);
  }

  /** A value not in the table yet (exact mode). */
  private insertValue(values: ValueCounter, hash: number, b: Buffer, s: number, e: number, cap: number): void {
    values.insert(hash, b, s, e, 1);
    if (values.size > cap) this.switchToSketch();
  }

  /** A value in estimated mode: sketch, kinds, numbers, min/max. (Kept apart so each part stays small enough to optimise well.) */
  private addEstimated(hash: number, w0: number, w1: number, b: Buffer, s: number, e: number): void {
    updateSketch(this.sketch!, hash);
    if (this.text) this.kinds[K_TEXT]!++;
    else {
      const k = classifyValue(b, s, e);
      this.kinds[k]!++;
      if (k <= K_NUM) this.addNumber(parsed[0]!, parsed[1]!, parsedScale[0]!, 1);
      const bit = KIND_BIT[k]!;
      if ((this.kindBits & bit) === 0) this.addKindBit(bit);
    }
    this.updateBounds(b, s, e, orderKey(w0), orderKey(w1));
  }

  /** Adds `n` occurrences of one value whose classification is known (folding a value table). */
  addCounted(b: Buffer, s: number, e: number, n: number, kind: number, x: number, m: number, scale: number): void {
    if (this.text) this.kinds[K_TEXT]! += n;
    else {
      this.kinds[kind]! += n;
      if (kind <= K_NUM) this.addNumber(x, m, scale, n);
      const bit = KIND_BIT[kind]!;
      if ((this.kindBits & bit) === 0) this.addKindBit(bit);
    }
    this.updateBounds(b, s, e, orderKey(loadWord(b, s, e)), s + 4 < e ? orderKey(loadWord(b, s + 4, e)) : ORDER_KEY_ZERO);
  }

  private addNumber(x: number, m: number, scale: number, n: number): void {
    this.numMin = Math.min(this.numMin, x); // Math.min orders -0 before 0, independent of order
    this.numMax = Math.max(this.numMax, x);
    if (scale >= 0) {
      if (n === 1) this.dec.add(m, scale);
      else this.dec.addRepeated(m, scale, n);
    } else if (x > HUGE || x < -HUGE) this.huge += n;
    else for (let j = 0; j < n; j++) this.bin.add(x);
  }

  private addKindBit(bit: number): void {
    this.kindBits |= bit;
    if (isTextFor(this.kindBits)) this.becomeText();
  }

  /** The type is text whatever comes next: keep only what a text column reports. */
  private becomeText(): void {
    let all = 0;
    for (let k = 0; k < 5; k++) all += this.kinds[k]!;
    this.kinds.fill(0);
    this.kinds[K_TEXT] = all;
    this.kindBits = KIND_BIT[K_TEXT]!;
    this.text = true;
    this.numMin = Infinity;
    this.numMax = -Infinity;
    this.huge = 0;
    this.dec = null;
    this.bin = null;
  }

  /**
   * Text min/max by bytes. k0, k1 are the value's first 8 bytes as order keys: a value whose keys
   * differ from a bound's is decided by them; only equal prefixes compare the rest.
   */
  private updateBounds(b: Buffer, s: number, e: number, k0: number, k1: number): void {
    if (this.loLen < 0 || k0 < this.loK0 || (k0 === this.loK0 && (k1 < this.loK1 || (k1 === this.loK1 && compareBytes(b, s, e, this.lo, this.loLen) < 0)))) {
      this.setLo(b, s, e);
    }
    if (this.hiLen < 0 || k0 > this.hiK0 || (k0 === this.hiK0 && (k1 > this.hiK1 || (k1 === this.hiK1 && compareBytes(b, s, e, this.hi, this.hiLen) > 0)))) {
      this.setHi(b, s, e);
    }
  }

  setLo(b: Uint8Array, s: number, e: number): void {
    const len = e - s;
    if (this.lo.length < len) this.lo = new Uint8Array(len * 2);
    for (let q = 0; q < len; q++) this.lo[q] = b[s + q]!;
    this.loLen = len;
    this.loK0 = orderKey(loadWord(b, s, e));
    this.loK1 = s + 4 < e ? orderKey(loadWord(b, s + 4, e)) : ORDER_KEY_ZERO;
  }

  setHi(b: Uint8Array, s: number, e: number): void {
    const len = e - s;
    if (this.hi.length < len) this.hi = new Uint8Array(len * 2);
    for (let q = 0; q < len; q++) this.hi[q] = b[s + q]!;
    this.hiLen = len;
    this.hiK0 = orderKey(loadWord(b, s, e));
    this.hiK1 = s + 4 < e ? orderKey(loadWord(b, s + 4, e)) : ORDER_KEY_ZERO;
  }

  switchToSketch(): void {
    const values = this.values;
    const reg = this.sketch ?? new Uint8Array(SKETCH_SIZE);
    this.values = null;
    this.sketch = reg;
    if (values === null) return;
    values.addToSketch(reg);
    values.foldInto(this);
  }

  /** Merges what a statistics-module slot gathered for this column (estimated mode; see stats-kernel.ts). */
  absorb(g: SlotFigures, cap: number): void {
    const o = new ColumnState(false);
    o.count = g.count;
    o.missing = g.missing;
    o.sketch = g.sketch;
    o.kinds.set(g.kinds);
    o.kindBits = g.kindBits;
    o.text = isTextFor(g.kindBits);
    o.numMin = g.numMin;
    o.numMax = g.numMax;
    o.dec = DecimalSums.fromAccumulators(g.decN, g.acc);
    if (g.lo !== null) o.setLo(g.lo, 0, g.lo.length);
    if (g.hi !== null) o.setHi(g.hi, 0, g.hi.length);
    this.merge(o, cap);
  }

  /** This column's figures with an exact-mode table folded in (a copy), or itself when estimated. */
  figures(): ColumnState {
    if (this.values === null) return this;
    const f = new ColumnState(false);
    f.count = this.count;
    f.missing = this.missing;
    this.values.foldInto(f);
    return f;
  }

  merge(o: ColumnState, cap: number): void {
    this.count += o.count;
    this.missing += o.missing;
    // Exact while the union of values stays within the cap; the union exceeds it (in any merge
    // order) exactly when the whole does, so the switch point cannot depend on order.
    if (this.values !== null && o.values !== null) {
      const values = this.values;
      o.values.forEach((a, s, e, n) => values.add(a, s, e, n));
      if (values.size > cap) this.switchToSketch();
      return;
    }
    this.switchToSketch();
    const reg = this.sketch!;
    if (o.values !== null) {
      o.values.addToSketch(reg);
      o.values.foldInto(this);
      return;
    }
    for (let j = 0; j < SKETCH_SIZE; j++) if (o.sketch![j]! > reg[j]!) reg[j] = o.sketch![j]!;
    for (let k = 0; k < 5; k++) this.kinds[k]! += o.kinds[k]!;
    if (!this.text && !o.text) {
      this.numMin = Math.min(this.numMin, o.numMin);
      this.numMax = Math.max(this.numMax, o.numMax);
      this.huge += o.huge;
      if (o.#dec !== null) this.dec.merge(o.#dec);
      if (o.#bin !== null) this.bin.merge(o.#bin);
    }
    const bits = this.kindBits | o.kindBits;
    if (this.text || o.text || isTextFor(bits)) this.becomeText();
    else this.kindBits = bits;
    if (o.loLen >= 0 && (this.loLen < 0 || compareBytes(o.lo, 0, o.loLen, this.lo, this.loLen) < 0)) this.setLo(o.lo, 0, o.loLen);
    if (o.hiLen >= 0 && (this.hiLen < 0 || compareBytes(o.hi, 0, o.hiLen, this.hi, this.hiLen) > 0)) this.setHi(o.hi, 0, o.hiLen);
  }

  /** merge() of a serialised column, without making a column of it where both are exact. */
  mergeSerialized(o: SerializedColumn, cap: number): void {
    if (this.values === null || o.values === null) {
      this.merge(ColumnState.fromJSON(o), cap);
      return;
    }
    this.count += o.count;
    this.missing += o.missing;
    this.values.addPacked(Buffer.from(o.values.keys, 'latin1'), o.values);
    if (this.values.size > cap) this.switchToSketch();
  }

  resolveType(): ColumnType {
    const k = this.kinds;
    const nInt = k[K_INT]!;
    const nNum = k[K_NUM]!;
    if (this.count === 0) return 'empty';
    if (k[K_TEXT]! > 0) return 'text';
    if (nInt + nNum === this.count) return nNum === 0 ? 'integer' : 'number';
    if (k[K_BOOL] === this.count) return 'boolean';
    if (k[K_DATE] === this.count) return 'datetime';
    return 'text';
  }

  summarize(name: string, topValues: number, excludeValues: boolean): ColumnSummary {
    const f = this.figures();
    const type = f.resolveType();
    const numeric = type === 'integer' || type === 'number';
    let min: number | string | null = null;
    let max: number | string | null = null;
    if (!excludeValues) {
      if (numeric) {
        min = f.numMin + 0; // + 0 turns -0 into 0
        max = f.numMax + 0;
      } else if (type === 'datetime' || type === 'text') {
        min = decodeUtf8(f.lo, f.loLen);
        max = decodeUtf8(f.hi, f.hiLen);
      }
    }
    let mean: number | null = null;
    let sd: number | null = null;
    if (numeric && f.huge === 0 && (!excludeValues || this.count >= 3)) {
      const mv = computeMeanVariance(f.dec, f.bin);
      mean = mv.mean + 0;
      if (this.count >= 2) sd = Math.sqrt(mv.variance);
      if (!Number.isFinite(mean)) mean = null;
      if (sd !== null && !Number.isFinite(sd)) sd = null;
    }
    let top: ValueCount[] | null = null;
    if (this.values !== null && !excludeValues) top = this.values.top(topValues);
    return {
      name,
      type,
      count: this.count,
      missing: this.missing,
      // An estimate can overshoot; there are never more distinct values than values.
      distinct: this.values !== null ? this.values.size : Math.min(this.count, estimateDistinct(this.sketch!)),
      approximate: this.values === null,
      min,
      max,
      mean,
      sd,
      top,
    };
  }

  serialize(canonical: boolean): SerializedColumn {
    if (this.values !== null) return { count: this.count, missing: this.missing, values: this.values.serialize(canonical) };
    const f = this.figures();
    return {
      count: this.count,
      missing: this.missing,
      values: null,
      kinds: [f.kinds[0]!, f.kinds[1]!, f.kinds[2]!, f.kinds[3]!, f.kinds[4]!],
      numMin: Number.isFinite(f.numMin) ? f.numMin : null,
      numMax: Number.isFinite(f.numMax) ? f.numMax : null,
      huge: f.huge,
      moments: f.bin.toJSON(),
      decimals: f.dec.toJSON(),
      lo: f.loLen < 0 ? null : Buffer.from(f.lo.subarray(0, f.loLen)).toString('latin1'),
      hi: f.hiLen < 0 ? null : Buffer.from(f.hi.subarray(0, f.hiLen)).toString('latin1'),
      sketch: Buffer.from(this.sketch!).toString('base64'),
    };
  }

  static fromJSON(s: SerializedColumn): ColumnState {
    const c = new ColumnState(false);
    c.count = s.count;
    c.missing = s.missing;
    if (s.values !== null) {
      // Exact mode: the table is the state; every other figure derives from it.
      const bytes = Buffer.from(s.values.keys, 'latin1');
      c.values = new ValueCounter(s.values.lengths.length, bytes.length);
      c.values.addPacked(bytes, s.values);
      return c;
    }
    for (let k = 0; k < 5; k++) {
      c.kinds[k] = s.kinds[k]!;
      if (s.kinds[k]! > 0) c.kindBits |= KIND_BIT[k]!;
    }
    c.text = isTextFor(c.kindBits);
    c.numMin = s.numMin ?? Infinity;
    c.numMax = s.numMax ?? -Infinity;
    c.huge = s.huge;
    c.bin = ExactMoments.fromJSON(s.moments);
    c.dec = DecimalSums.fromJSON(s.decimals);
    if (s.lo !== null) {
      const lo = Buffer.from(s.lo, 'latin1');
      c.setLo(lo, 0, lo.length);
    }
    if (s.hi !== null) {
      const hi = Buffer.from(s.hi, 'latin1');
      c.setHi(hi, 0, hi.length);
    }
    c.sketch = new Uint8Array(Buffer.from(s.sketch, 'base64'));
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

/** What a column's statistics-module slot holds (TableStats.#slotMode). */
const SLOT_ESTIMATED = 0;
const SLOT_EXACT = 1;
/** A column below the cap whose values repeat (four times on average, over at least 1,024): the module counts it. */
function repeats(c: ColumnState): boolean {
  return c.values !== null && c.count >= 1024 && c.count >= 4 * c.values.size;
}

/** Output of ValueCounter.keyWords. */
const keyWords = new Int32Array(5);

/** Records per block in TableStats.addBatch, without and with the statistics module. */
const STATS_BLOCK = 256;
const KERNEL_BLOCK = 2048;

// --- the table ---------------------------------------------------------------------------------

export class TableStats {
  readonly columns: string[];
  readonly distinctCap: number;
  readonly topValues: number;
  /** Records seen (addRecordDone calls, plus merged records). */
  records = 0;
  private readonly cols: ColumnState[];
  /** The statistics module (made at the first batch a column needs it), null where it cannot run. */
  #kernel: StatsKernel | null | undefined;
  /** Values given to each column's module slot since it was last merged; -1: nothing there. */
  #inSlot: number[];
  /** What each column's slot holds: SLOT_EXACT counts of its exact table, or SLOT_ESTIMATED figures. */
  #slotMode: number[];
  /** Keys of each column's value table registered in the module's exact table. */
  #registered: number[];
  /** Columns below the cap that the module counts in this batch (see #prepareTables). */
  #tabled: boolean[];

  /**
   * `recycle`: a table of the same columns that is no longer used, whose value tables this one
   * empties and counts in. Parts read back one after another each fill a table of every column;
   * made afresh, a wide input's tables grew from empty for each part (2,002 columns: ~64 MB a
   * part, grown by doubling, then left to the collector).
   */
  constructor(columns: string[], opts: StatsOptions = {}, recycle?: TableStats) {
    this.columns = columns.slice();
    this.distinctCap = opts.distinctCap ?? 1000;
    this.topValues = opts.topValues ?? 10;
    if (!Number.isInteger(this.distinctCap) || this.distinctCap < 0) {
      throw new RowdeckError('RDK_OPTION', `distinct cap must be a whole number >= 0, got ${this.distinctCap}.`);
    }
    const reused = recycle && recycle.cols.length === columns.length ? recycle.cols.map((c) => c.values) : null;
    if (recycle) recycle.#recycled();
    this.cols = columns.map((_, i) => {
      const values = reused?.[i];
      values?.clear();
      return new ColumnState(true, values ?? undefined);
    });
    this.#inSlot = columns.map(() => -1);
    this.#slotMode = columns.map(() => SLOT_ESTIMATED);
    this.#registered = columns.map(() => 0);
    this.#tabled = columns.map(() => false);
  }

  /**
   * Adds one field of the current record. `data[start, end)` holds the raw field as read: for
   * CsvQuoted with its outer quotes, for JsonString as a JSON string token.
   */
  addField(col: number, data: Buffer, start: number, end: number, kind: FieldKind): void {
    // Whatever the module holds for this column first: this value may pass the cap.
    if (this.#inSlot[col] !== undefined && this.#inSlot[col]! >= 0) this.#drain(col);
    this.#addFieldHere(col, data, start, end, kind);
  }

  /** addField without the module: its escapes, and the per-record path. */
  #addFieldHere(col: number, data: Buffer, start: number, end: number, kind: FieldKind): void {
    const c = this.cols[col];
    if (c === undefined) throw new RowdeckError('RDK_INTERNAL', `statistics: column ${col} out of range (${this.cols.length} columns).`);
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

  /**
   * Adds every record of a batch (see addRecord). Column by column: one column's state, table and
   * branches stay hot over the whole batch, and plain fields (most) go straight to the column.
   * `first`: the batch's wanted field that is this table's first column (a table may hold a
   * share of a wide input's columns, see `columnShare` in src/engine/profile.ts).
   */
  addBatch(batch: RecordBatch, first = 0): void {
    const W = batch.wanted;
    const n = batch.count;
    const nc = Math.max(0, Math.min(W - first, this.cols.length));
    // Blocks of records small enough that their bytes and field ranges stay in cache while
    // each column takes its turn (a whole batch is about 2 MB; measured faster than both
    // whole-batch columns and record by record). Columns go to the statistics module where it
    // runs (past the distinct cap, or below it with a table there), which takes a copy of the
    // batch first; a call into it costs more than a JavaScript one, so its blocks are larger.
    const kernel = n > 0 ? this.#loadKernel(batch) : null;
    const block = kernel === null ? STATS_BLOCK : KERNEL_BLOCK;
    for (let i0 = 0; i0 < n; i0 += block) {
      const i1 = Math.min(n, i0 + block);
      for (let f = 0; f < nc; f++) {
        const g = first + f;
        if (kernel !== null) {
          if (this.cols[f]!.values === null) this.#addColumnByKernel(kernel, f, g, batch, W, i0, i1);
          else if (this.#tabled[f]) this.#addExactByKernel(kernel, f, g, batch, W, i0, i1);
          else this.addColumnOfBatch(f, g, batch, W, i0, i1);
        } else this.addColumnOfBatch(f, g, batch, W, i0, i1);
      }
    }
    this.records += n;
  }

  /** The module, with this batch copied in; null when no column would use it (nothing is copied then). */
  #loadKernel(batch: RecordBatch): StatsKernel | null {
    if (!this.cols.some((c) => c.values === null || repeats(c))) return null;
    if (this.#kernel === undefined) this.#kernel = StatsKernel.create(this.cols.length, this.distinctCap);
    const kernel = this.#kernel;
    if (kernel === null) return null;
    this.#prepareTables(kernel);
    return kernel.load(batch) ? kernel : null;
  }

  /**
   * Before a batch: which columns below the cap the module counts, and their tables. A column
   * qualifies once its values repeat (four times on average, over at least 1,024), so the many
   * columns that pass the cap early never get a table; a table is made again, larger, when its
   * keys outgrow it (its counts merged first).
   */
  #prepareTables(kernel: StatsKernel): void {
    for (let f = 0; f < this.cols.length; f++) {
      const c = this.cols[f]!;
      const values = c.values;
      this.#tabled[f] = false;
      if (values === null || !repeats(c)) continue;
      if (!kernel.hasRoom(f, values.size)) {
        this.#drain(f);
        if (!kernel.newTable(f, values.size)) continue;
        this.#registered[f] = 0;
      }
      this.#register(kernel, f, values);
      this.#tabled[f] = true;
    }
  }

  /**
   * addColumnOfBatch for a column below the cap, by the statistics module: values among the keys
   * registered with it are counted there; the rest (new keys, long values, escapes) here.
   * Column f of this table is field g of the batch's records.
   */
  #addExactByKernel(kernel: StatsKernel, f: number, g: number, batch: RecordBatch, W: number, i0: number, i1: number): void {
    const c = this.cols[f]!;
    const values = c.values!;
    this.#register(kernel, f, values);
    this.#enterSlot(f, SLOT_EXACT, i1 - i0);
    for (let i = i0; i < i1; ) {
      const r = kernel.runExact(f, W, g, i, i1);
      if (r >= i1) break;
      // A new key may pass the cap and fold the table into estimates: its counts must be there.
      if (values.size >= this.distinctCap) this.#drain(f);
      const k = r * W + g;
      this.#addFieldHere(f, batch.data, batch.fieldStart[k]!, batch.fieldEnd[k]!, batch.fieldKind[k]! as FieldKind);
      i = r + 1;
      if (c.values === null) {
        if (i < i1) this.#addColumnByKernel(kernel, f, g, batch, W, i, i1);
        return;
      }
      this.#register(kernel, f, values);
      // Merged above, yet still below the cap: the slot counts the rest from empty.
      if (this.#inSlot[f]! < 0) this.#enterSlot(f, SLOT_EXACT, i1 - i);
    }
  }

  /**
   * Registers the value table's keys added since the last call (those short enough) with the
   * module, while its table has room; the rest wait for the next batch's larger table.
   */
  #register(kernel: StatsKernel, f: number, values: ValueCounter): void {
    let i = this.#registered[f]!;
    for (; i < values.size && kernel.hasRoom(f, i + 1); i++) {
      values.keyWords(i, keyWords);
      if (keyWords[4]! <= EXACT_KEY_LIMIT) kernel.register(f, i, keyWords[0]!, keyWords[1]!, keyWords[2]!, keyWords[3]!, keyWords[4]!);
    }
    this.#registered[f] = i;
  }

  /** Marks column f's slot as holding `mode` figures, with `n` more values (merged first when they could overflow it). */
  #enterSlot(f: number, mode: number, n: number): void {
    if (this.#inSlot[f]! + n > SLOT_VALUES || (this.#inSlot[f]! >= 0 && this.#slotMode[f] !== mode)) this.#drain(f);
    this.#slotMode[f] = mode;
    this.#inSlot[f] = Math.max(this.#inSlot[f]!, 0) + n;
  }

  /** addColumnOfBatch for a column in estimated mode, by the statistics module (see stats-kernel.ts). */
  #addColumnByKernel(kernel: StatsKernel, f: number, g: number, batch: RecordBatch, W: number, i0: number, i1: number): void {
    const c = this.cols[f]!;
    this.#enterSlot(f, SLOT_ESTIMATED, i1 - i0);
    for (let i = i0; i < i1; ) {
      const r = kernel.run(f, c.text, W, g, i, i1);
      if (r >= i1) break;
      // A field the module leaves to this thread.
      const k = r * W + g;
      this.#addFieldHere(f, batch.data, batch.fieldStart[k]!, batch.fieldEnd[k]!, batch.fieldKind[k]! as FieldKind);
      i = r + 1;
    }
  }

  /** Merges column f's module slot into its state. */
  #drain(f: number): void {
    if (this.#inSlot[f]! < 0) return;
    const c = this.cols[f]!;
    if (this.#slotMode[f] === SLOT_EXACT) {
      const values = c.values;
      // Every path that can pass the cap merges these counts first.
      if (values === null) throw new RowdeckError('RDK_INTERNAL', `statistics: column ${this.columns[f]} passed the distinct cap with counts still in the module.`);
      const seen = this.#kernel!.takeExact(f, values.size, (i, n) => values.addCount(i, n));
      c.count += seen.count;
      c.missing += seen.missing;
    } else c.absorb(this.#kernel!.take(f), this.distinctCap);
    this.#inSlot[f] = -1;
  }

  /** Every module slot merged: the columns' states hold all figures (before anything reads them). */
  #drainAll(): void {
    for (let f = 0; f < this.cols.length; f++) this.#drain(f);
  }

  private addColumnOfBatch(f: number, g: number, batch: RecordBatch, W: number, i0: number, i1: number): void {
    // Counts the module holds for this column below the cap first: a value here may pass it.
    if (this.#inSlot[f]! >= 0 && this.#slotMode[f] === SLOT_EXACT) this.#drain(f);
    const c = this.cols[f]!;
    const cap = this.distinctCap;
    const data = batch.data;
    const fs = batch.fieldStart;
    const fe = batch.fieldEnd;
    const fk = batch.fieldKind;
    for (let i = i0, k = i0 * W + g; i < i1; i++, k += W) {
      const s = fs[k]!;
      const e = fe[k]!;
      if (fk[k] === FieldKind.Plain) {
        if (s === e) c.missing++;
        else c.addValue(data, s, e, cap);
      } else this.#addFieldHere(f, data, s, e, fk[k]! as FieldKind);
    }
  }

  /** Gives this table's value tables away (see the constructor's `recycle`): it is not to be used again. */
  #recycled(): void {
    this.releaseKernel();
    for (let i = 0; i < this.cols.length; i++) this.cols[i] = new ColumnState(false);
    this.records = Number.NaN;
  }

  /** Folds another table's figures into this one: exact, and the result does not depend on order. */
  merge(other: TableStats): void {
    this.#checkMergeable(other);
    this.#drainAll();
    other.#drainAll();
    this.records += other.records;
    for (let i = 0; i < this.cols.length; i++) this.cols[i]!.merge(other.cols[i]!, this.distinctCap);
  }

  /** merge(TableStats.fromJSON(s)), without making a table of s first (a wide one is large). */
  mergeSerialized(s: SerializedStats): void {
    if (s.version !== 2) throw new RowdeckError('RDK_INTERNAL', `statistics: unknown serialised version ${String(s.version)}.`);
    this.#checkMergeable(s);
    this.#drainAll();
    this.records += s.records;
    for (let i = 0; i < this.cols.length; i++) this.cols[i]!.mergeSerialized(s.stats[i]!, this.distinctCap);
  }

  #checkMergeable(other: { columns: readonly string[]; distinctCap: number }): void {
    if (other.columns.length !== this.columns.length || other.columns.some((c, i) => c !== this.columns[i])) {
      throw new RowdeckError('RDK_INTERNAL', `statistics: cannot merge tables with different columns (${this.columns.join(',')} vs ${other.columns.join(',')}).`);
    }
    if (other.distinctCap !== this.distinctCap) {
      throw new RowdeckError('RDK_INTERNAL', `statistics: cannot merge tables with different distinct caps (${this.distinctCap} vs ${other.distinctCap}).`);
    }
  }

  /**
   * Gives the statistics module's instance back for the next table made on this thread (its
   * figures merged first). The table stays usable; it goes on in JavaScript alone.
   */
  releaseKernel(): void {
    this.#drainAll();
    this.#kernel?.release();
    this.#kernel = null;
  }

  /** Canonical plain-data form: equal figures give deep-equal objects whatever the history. */
  toJSON(): SerializedStats {
    return this.serialize(true);
  }

  /**
   * Plain-data form for another thread: toJSON's, but with exact values in table order (equal
   * figures may give objects that differ in that order).
   */
  toTransfer(): SerializedStats {
    return this.serialize(false);
  }

  private serialize(canonical: boolean): SerializedStats {
    this.#drainAll();
    return {
      version: 2,
      columns: this.columns.slice(),
      distinctCap: this.distinctCap,
      topValues: this.topValues,
      records: this.records,
      stats: this.cols.map((c) => c.serialize(canonical)),
    };
  }

  static fromJSON(s: SerializedStats): TableStats {
    if (s.version !== 2) throw new RowdeckError('RDK_INTERNAL', `statistics: unknown serialised version ${String(s.version)}.`);
    const t = new TableStats(s.columns, { distinctCap: s.distinctCap, topValues: s.topValues });
    t.records = s.records;
    for (let i = 0; i < s.stats.length; i++) t.cols[i] = ColumnState.fromJSON(s.stats[i]!);
    return t;
  }

  /** The smallest and largest value bytes of column f, in byte order (null while it has none). */
  bounds(f: number): { lo: Buffer | null; hi: Buffer | null } {
    this.#drainAll();
    const c = this.cols[f]!.figures();
    return {
      lo: c.loLen < 0 ? null : Buffer.from(c.lo.subarray(0, c.loLen)),
      hi: c.hiLen < 0 ? null : Buffer.from(c.hi.subarray(0, c.hiLen)),
    };
  }

  /** The profile/manifest form, one entry per column, keys in a fixed order. */
  summary(opts: SummaryOptions = {}): ColumnSummary[] {
    const exclude = opts.excludeValues === true;
    this.#drainAll();
    return this.cols.map((c, i) => c.summarize(this.columns[i]!, this.topValues, exclude));
  }
}
