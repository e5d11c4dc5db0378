/**
 * The column statistics' per-value work, in WebAssembly (src/core/stats.wat, written by
 * scripts/stats-wasm.mjs). TableStats (src/core/stats.ts) hands it runs of a column's fields:
 * - past the distinct cap (estimated mode), the module adds each value to the column's accumulator
 *   slot by the same steps as ColumnState.addEstimated (and addField's unquoting: a CSV "" is
 *   undone in a scratch area);
 * - below it, for columns whose values repeat, it counts each value against the keys JavaScript
 *   registered in the column's exact table (keys of up to 12 bytes).
 * It stops at a value it leaves to JavaScript (a JSON escape, a value longer than BOUND_CAP bytes,
 * a number needing the general conversion, a key not registered), which adds that one to the
 * column's own state and calls again.
 *
 * A slot is merged into its column (and emptied) whenever the figures are read, and before its
 * exact decimal accumulators could lose exactness. ColumnState.merge is exact and does not depend
 * on order, so the figures equal those of the JavaScript path alone; test/stats.kernel.test.ts
 * compares the two on values of every kind.
 *
 * Memory: constants and a scratch area below 4 KiB; one 8 KiB slot per column; the exact tables,
 * made as columns need them; then, for the batch in hand, a copy of its field arrays and bytes
 * (the module cannot see a JavaScript buffer).
 * `ROWDECK_STATS=js`, or a runtime without WebAssembly SIMD, keeps everything in JavaScript.
 */
import type { RecordBatch } from './record-batch.js';
import { STATS_LAYOUT, STATS_WASM_BASE64 } from './stats-wasm.js';
import { growTo, instantiate, type WasmMemory } from './wasm.js';
import { flags } from '../flags.js';

// The slot's layout, as scripts/stats-wasm.mjs made the module with it.
const { slotsAt: SLOTS_AT, slot: S } = STATS_LAYOUT;
const SLOT_BYTES = S.bytes;
const SKETCH_SIZE = STATS_LAYOUT.sketchRegisters;
const ACC_COUNT = STATS_LAYOUT.accScales * STATS_LAYOUT.accPerScale;
const KINDS_BYTES = 8 * STATS_LAYOUT.kinds;
/** Longest value the module adds itself. */
export const BOUND_CAP = S.boundCap;
/** Room after copied bytes for the module's reads past a value's end. */
const SLACK = 16;
/**
 * Values a slot takes between merges: its decimal accumulators each gain less than 2^27 a value
 * and stay exact below 2^53 (see DecimalSums), so 2^24 leaves a wide margin.
 */
export const SLOT_VALUES = 1 << 24;

type ColumnFn = (slot: number, base: number, fs: number, fe: number, fk: number, W: number, f: number, i0: number, i1: number) => number;
type TopFn = (at: number, n: number) => number;
type ExactFn = (slot: number, table: number, mask: number, base: number, fs: number, fe: number, fk: number, W: number, f: number, i0: number, i1: number) => number;
/** The most columns a table may have for the module to take it (their slots take 4 MiB). */
export const MAX_COLUMNS = 512;
/** Bytes of a key entry in a column's exact table. */
const ENTRY = STATS_LAYOUT.exactEntryBytes;
/** Longest value the exact tables hold (its bytes are its three words). */
export const EXACT_KEY_LIMIT = 12;
/** The exact tables of all columns together stay below this; past it, exact mode stays in JavaScript. */
const EXACT_BYTES_LIMIT = 32 << 20;

/** What a slot gathered (copies), for ColumnState to merge. */
export interface SlotFigures {
  count: number;
  missing: number;
  kinds: Float64Array;
  kindBits: number;
  numMin: number;
  numMax: number;
  /** Values in the decimal accumulators, and the accumulators (DecimalSums' layout). */
  decN: number;
  acc: Float64Array;
  lo: Uint8Array | null;
  hi: Uint8Array | null;
  sketch: Uint8Array;
}

interface KernelExports {
  memory: WasmMemory;
  column: ColumnFn;
  exact: ExactFn;
  top: TopFn;
}

/** Instances given back by `release`, for the next `create`. */
const released: KernelExports[] = [];
const MAX_RELEASED = 2;

export class StatsKernel {
  readonly #memory: WasmMemory;
  readonly #column: ColumnFn;
  readonly #exact: ExactFn;
  readonly #top: TopFn;
  /** Each column's exact table (0: none) and its entries (a power of two); counts follow the entries. */
  readonly #tableAt: number[];
  readonly #tableEntries: number[];
  /** Entries enough for the most keys a table below the cap holds (at most half full). */
  readonly #maxEntries: number;
  /** End of the tables (made as columns need them, after the slots); the batch's copy comes after. */
  #tablesEnd: number;
  #dataAt: number;
  #u8: Uint8Array;
  #dv: DataView;
  #base = 0;
  #fs = 0;
  #fe = 0;
  #fk = 0;

  private constructor(memory: WasmMemory, column: ColumnFn, exact: ExactFn, top: TopFn, columns: number, distinctCap: number) {
    this.#memory = memory;
    this.#column = column;
    this.#exact = exact;
    this.#top = top;
    let entries = 64;
    while (entries < 2 * (distinctCap + 1)) entries *= 2;
    this.#maxEntries = entries;
    this.#tableAt = new Array<number>(columns).fill(0);
    this.#tableEntries = new Array<number>(columns).fill(0);
    this.#tablesEnd = SLOTS_AT + columns * SLOT_BYTES;
    this.#dataAt = this.#tablesEnd;
    growTo(memory, this.#dataAt);
    this.#u8 = new Uint8Array(memory.buffer);
    this.#dv = new DataView(memory.buffer);
    for (let c = 0; c < columns; c++) this.#reset(c);
  }

  /**
   * A kernel with a slot (and, when they fit, an exact table) for each of `columns` columns of a
   * table with the given distinct cap, or null where the module cannot run here.
   */
  static create(columns: number, distinctCap = 1000): StatsKernel | null {
    // Slots are 8 KiB a column, and each table (a part's, with --stats) has its own: wider tables
    // stay in JavaScript.
    if (disabled || columns > MAX_COLUMNS) return null;
    const exp = released.pop() ?? instantiate<KernelExports>('stats', STATS_WASM_BASE64, ['memory', 'column', 'exact', 'top']);
    return exp ? new StatsKernel(exp.memory, exp.column, exp.exact, exp.top, columns, distinctCap) : null;
  }

  /**
   * Hands the module instance over to the next `create` on this thread (its memory is kept, and
   * reset by the next owner): a thread that makes one table after another (a part at a time)
   * then holds one instance, not one per table until the collector frees them. This kernel must
   * not be used again.
   */
  release(): void {
    if (released.length < MAX_RELEASED) released.push({ memory: this.#memory, column: this.#column, exact: this.#exact, top: this.#top });
  }

  /** Column `col` has a table with room for `keys` keys. */
  hasRoom(col: number, keys: number): boolean {
    return this.#tableAt[col] !== 0 && 2 * keys <= this.#tableEntries[col]!;
  }

  /**
   * Gives column `col` a new, empty table with room for `keys` keys and as many again (call between
   * batches: it is placed where the batch's copy would go). False when the tables would pass
   * EXACT_BYTES_LIMIT; the column is then counted in JavaScript.
   */
  newTable(col: number, keys: number): boolean {
    let entries = 64;
    while (entries < 4 * (keys + 1) && entries < this.#maxEntries) entries *= 2;
    const bytes = entries * ENTRY + 2 * entries;
    const at = this.#tablesEnd;
    const slotsEnd = SLOTS_AT + this.#tableAt.length * SLOT_BYTES;
    if (at + bytes - slotsEnd > EXACT_BYTES_LIMIT || !growTo(this.#memory, at + bytes)) return false;
    this.#refresh();
    this.#u8.fill(0, at, at + bytes);
    this.#tableAt[col] = at;
    this.#tableEntries[col] = entries;
    this.#tablesEnd = at + align16(bytes);
    this.#dataAt = this.#tablesEnd;
    return true;
  }

  /**
   * Counts field f of records i0..i1 against column `col`'s registered keys (a column below the
   * distinct cap, with a table), up to the first value that is not one of them; returns that
   * record, or i1.
   */
  runExact(col: number, W: number, f: number, i0: number, i1: number): number {
    const slot = SLOTS_AT + col * SLOT_BYTES;
    return this.#exact(slot, this.#tableAt[col]!, this.#tableEntries[col]! - 1, this.#base, this.#fs, this.#fe, this.#fk, W, f, i0, i1);
  }

  /** Adds key `index` of column `col` (its hash, first words and length, at most EXACT_KEY_LIMIT) to the column's table (hasRoom for index + 1 keys). */
  register(col: number, index: number, hash: number, w0: number, w1: number, w2: number, len: number): void {
    this.#refresh();
    const d = this.#dv;
    const table = this.#tableAt[col]!;
    const mask = this.#tableEntries[col]! - 1;
    let e = hash & mask;
    while (d.getInt32(table + e * ENTRY + 4, true) !== 0) e = (e + 1) & mask;
    const at = table + e * ENTRY;
    d.setInt32(at, hash, true);
    d.setInt32(at + 4, len + 1, true);
    d.setInt32(at + 8, w0, true);
    d.setInt32(at + 12, w1, true);
    d.setInt32(at + 16, w2, true);
    d.setInt32(at + 20, index, true);
  }

  /**
   * What column `col`'s exact table counted since the last call: `add(index, n)` for each of its
   * first `keys` keys counted, and the values and missing fields seen; then empties the counts.
   */
  takeExact(col: number, keys: number, add: (index: number, n: number) => void): { count: number; missing: number } {
    this.#refresh();
    const d = this.#dv;
    const counts = this.#tableAt[col]! + this.#tableEntries[col]! * ENTRY;
    const n = this.#tableAt[col] === 0 ? 0 : Math.min(keys, this.#tableEntries[col]! / 2);
    for (let i = 0; i < n; i++) {
      const c = d.getUint32(counts + 4 * i, true);
      if (c !== 0) {
        add(i, c);
        d.setUint32(counts + 4 * i, 0, true);
      }
    }
    const slot = SLOTS_AT + col * SLOT_BYTES;
    const out = { count: d.getFloat64(slot + S.count, true), missing: d.getFloat64(slot + S.missing, true) };
    d.setFloat64(slot + S.count, 0, true);
    d.setFloat64(slot + S.missing, 0, true);
    return out;
  }

  /**
   * Copies the batch's bytes and field arrays into the module's memory, for the next runs (a
   * reader may reuse a batch object, so every addBatch loads again). False when it cannot.
   */
  load(batch: RecordBatch): boolean {
    const n = batch.count;
    const cells = n * batch.wanted;
    if (n === 0) return false;
    // The field arrays first, then the bytes: every field lies in data[0, the largest field end),
    // which the module finds (the records' own ranges are not relied on).
    const fsAt = this.#dataAt;
    const feAt = fsAt + align16(4 * cells);
    const fkAt = feAt + align16(4 * cells);
    const bytesAt = fkAt + align16(cells + SLACK);
    if (!growTo(this.#memory, bytesAt)) return false;
    this.#refresh();
    let u8 = this.#u8;
    new Uint32Array(u8.buffer, fsAt, cells).set(batch.fieldStart.subarray(0, cells));
    new Uint32Array(u8.buffer, feAt, cells).set(batch.fieldEnd.subarray(0, cells));
    u8.set(batch.fieldKind.subarray(0, cells), fkAt);
    const to = this.#top(feAt, cells) >>> 0;
    const need = bytesAt + align16(to + SLACK);
    if (to > batch.data.length || need > 0x7fff0000 || !growTo(this.#memory, need)) return false;
    this.#refresh();
    u8 = this.#u8;
    u8.set(batch.data.subarray(0, to), bytesAt);
    u8.fill(0, bytesAt + to, bytesAt + to + SLACK);
    this.#base = bytesAt;
    this.#fs = fsAt;
    this.#fe = feAt;
    this.#fk = fkAt;
    return true;
  }

  /**
   * Adds field f of records i0..i1 of the loaded batch (W fields a record) to slot `col`, up to
   * the first one it leaves to JavaScript; returns that record, or i1. `text`: the column's type
   * is already text, so values need not be classified.
   */
  run(col: number, text: boolean, W: number, f: number, i0: number, i1: number): number {
    const slot = SLOTS_AT + col * SLOT_BYTES;
    if (text) this.#dv.setInt32(slot + S.text, 1, true);
    return this.#column(slot, this.#base, this.#fs, this.#fe, this.#fk, W, f, i0, i1);
  }

  /** Slot `col`'s figures, and empties it. */
  take(col: number): SlotFigures {
    const slot = SLOTS_AT + col * SLOT_BYTES;
    this.#refresh();
    const u8 = this.#u8;
    const d = this.#dv;
    const f64 = (at: number): number => d.getFloat64(slot + at, true);
    const bytes = (at: number, lenAt: number): Uint8Array | null => {
      const len = d.getInt32(slot + lenAt, true);
      return len < 0 ? null : u8.slice(slot + at, slot + at + len);
    };
    const figures: SlotFigures = {
      count: f64(S.count),
      missing: f64(S.missing),
      kinds: new Float64Array(u8.buffer.slice(slot + S.kinds, slot + S.kinds + KINDS_BYTES)),
      kindBits: d.getInt32(slot + S.bits, true),
      numMin: f64(S.min),
      numMax: f64(S.max),
      decN: f64(S.decN),
      acc: new Float64Array(u8.buffer.slice(slot + S.acc, slot + S.acc + 8 * ACC_COUNT)),
      lo: bytes(S.lo, S.loLen),
      hi: bytes(S.hi, S.hiLen),
      sketch: u8.slice(slot + S.sketch, slot + S.sketch + SKETCH_SIZE),
    };
    this.#reset(col);
    return figures;
  }

  /** Views made anew after the memory grew (growing detaches the old buffer). */
  #refresh(): void {
    if (this.#u8.buffer === this.#memory.buffer) return;
    this.#u8 = new Uint8Array(this.#memory.buffer);
    this.#dv = new DataView(this.#memory.buffer);
  }

  #reset(col: number): void {
    const slot = SLOTS_AT + col * SLOT_BYTES;
    this.#refresh();
    this.#u8.fill(0, slot, slot + SLOT_BYTES);
    const d = this.#dv;
    d.setFloat64(slot + S.min, Infinity, true);
    d.setFloat64(slot + S.max, -Infinity, true);
    d.setInt32(slot + S.loLen, -1, true);
    d.setInt32(slot + S.hiLen, -1, true);
  }
}

function align16(n: number): number {
  return (n + 15) & ~15;
}

let disabled = flags.stats === 'js';

/** Tests and benchmarks: `false` keeps the statistics in JavaScript (tables created after the call). */
export function useStatsKernel(on: boolean): void {
  disabled = !on;
}
