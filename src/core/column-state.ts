/**
 * One column's statistics while they are gathered: counts, the value table (value-counter.ts)
 * or, past the distinct cap, the sketch and the accumulated figures; merging two columns, the
 * summary, and the serialised form. And the hash every value is added by (hashKey).
 */

import { computeMeanVariance, DecimalSums } from './decimal-sums.js';
import { ExactMoments } from './exact-sum.js';
import type { SlotFigures } from './stats-kernel.js';
import type { ColumnSummary, ColumnType, SerializedColumn, SerializedExactColumn, ValueCount } from './stats-types.js';
import { compareBytes, decodeUtf8, loadWord, ORDER_KEY_ZERO, orderKey } from './value-bytes.js';
import { ValueCounter } from './value-counter.js';
import { classifyValue, HUGE, isTextFor, K_BOOL, K_DATE, K_INT, K_NUM, K_TEXT, KIND_BIT, parsed, parsedScale } from './value-kind.js';
import { estimateDistinct, mix32, SKETCH_SIZE, updateSketch } from './value-sketch.js';

/**
 * Hash of a value's bytes, fixed (sketches of different threads and runs must merge): the bytes
 * as 32-bit little-endian words, the last one zero-padded, each mixed in by multiply-xorshift,
 * seeded with the length, then murmur3's finaliser (mix32). Its top 12 bits pick the sketch
 * register; a second finalisation of it gives the rank bits (see updateSketch). It keys the
 * value table too. It lives beside ColumnState, whose addValue is its hot caller: constants and
 * views read from another module cost a few instructions each on every value.
 *
 * The first three words are also the statistics module's key for values of up to 12 bytes (most
 * values): equal words and length mean equal bytes (see ValueCounter.keyWords).
 */
const HASH_SEED = 0x811c9dc5;
const HASH_MUL = 0x9e3779b1;
/** Masks that keep the low n bytes of a word, n = 0..3. */
const LOW_BYTES = Int32Array.of(0, 0xff, 0xffff, 0xffffff);

/** Output of hashKey(): [hash, word 0, word 1, word 2] (a typed array: no boxing, see `parsed` in value-kind.ts). */
const keyOut = new Int32Array(4);

/** The hash and first three words of b[s, e) into keyOut (the general path; ColumnState.addValue unrolls it for short values). */
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
export class ColumnState {
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
      o.values.forEach((a, s, e, n, hash) => values.add(hash, a, s, e, n));
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
    addPacked(this.values, Buffer.from(o.values.keys, 'latin1'), o.values);
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
      addPacked(c.values, bytes, s.values);
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

/** Adds the counts of a serialised value table (its keys' bytes in `bytes`) to `values`. */
function addPacked(values: ValueCounter, bytes: Buffer, packed: SerializedExactColumn['values']): void {
  const { lengths, counts } = packed;
  for (let i = 0, at = 0; i < lengths.length; at += lengths[i]!, i++) {
    hashKey(bytes, at, at + lengths[i]!);
    values.add(keyOut[0]!, bytes, at, at + lengths[i]!, counts[i]!);
  }
}
