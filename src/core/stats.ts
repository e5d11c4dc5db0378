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
 * FieldKind in core/record-batch.ts) and are read without building strings on the numeric path.
 *
 * Speed (bench/micro/stats.mjs): a batch is read column by column; a value already in a column's
 * table costs one hash and one lookup; past the distinct cap, one pass over a number's bytes
 * classifies and parses it, and a column whose type is already decided as text skips that too.
 *
 * Missing values are empty fields (also `""` and the JSON empty string) and absent/null JSON
 * fields; the type of a column comes from its other values (see value-kind.ts).
 *
 * The work is split by job: value-kind.ts (classifying a value), value-sketch.ts (the distinct
 * sketch and the hash), value-counter.ts (the value table), column-state.ts (one column), and
 * here the table of all columns, fed from record batches, with the statistics module
 * (stats-kernel.ts) where it runs.
 */

import { FieldKind } from './record-batch.js';
import type { RecordBatch } from './record-batch.js';
import { RowdeckError } from '../errors.js';
import { ColumnState } from './column-state.js';
import { EXACT_KEY_LIMIT, SLOT_VALUES, StatsKernel } from './stats-kernel.js';
import type { ColumnSummary, SerializedStats, StatsOptions, SummaryOptions } from './stats-types.js';
import type { ValueCounter } from './value-counter.js';

export type { ColumnSummary, ColumnType, SerializedColumn, SerializedEstimatedColumn, SerializedExactColumn, SerializedStats, StatsOptions, SummaryOptions, ValueCount } from './stats-types.js';

let scratch = Buffer.allocUnsafe(256);

function ensureScratch(n: number): Buffer {
  if (scratch.length < n) scratch = Buffer.allocUnsafe(Math.max(n, scratch.length * 2));
  return scratch;
}

/** True when byte c occurs in b[s, e). (Buffer#indexOf would scan past e, to the end of the batch.) */
function hasByte(b: Buffer, s: number, e: number, c: number): boolean {
  for (let i = s; i < e; i++) if (b[i] === c) return true;
  return false;
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
   * share of a wide input's columns, see `columnShare` in src/engine/profile/task.ts).
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
