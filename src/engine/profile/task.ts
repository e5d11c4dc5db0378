/**
 * ProfileTask: the per-batch work of `profile`, on a worker thread (src/workers/profile-worker.ts)
 * or on the calling thread: column statistics (core/stats.ts) and stratum counts, with the same
 * keys as `shuffle` (core/strata.ts). Wide inputs share their columns among the threads instead
 * of their records (COLUMN_SHARE_MIN).
 */
import { ByteIdTable } from '../../core/byte-table.js';
import { TableStats, type SerializedStats } from '../../core/stats.js';
import { columnKey, keyBytes, MAX_STRATA, stratumKey, tooManyStrata, type KeyRange } from '../../core/strata.js';
import { RowdeckError } from '../../errors.js';
import { FieldKind, type RecordBatch } from '../../io/batch.js';

/** What one profile task needs: plain data, so it can be posted to a worker. */
export interface ProfileTaskConfig {
  columns: string[];
  /** Display names of the inputs, for messages. */
  files: string[];
  /** Stratify columns: index into `columns`, name, and quantile bin edges or null. */
  stratify: { column: number; name: string; edges: number[] | null }[];
  /**
   * 0: the task keeps statistics of every column (of the records it is given). N > 0: the
   * columns are shared among N tasks, each given every record (see COLUMN_SHARE_MIN); the task
   * of lane k keeps those of `columnShare(columns.length, N, k)`, and only lane 0 counts classes.
   */
  columnShares: number;
}

/**
 * Inputs at least this wide share their columns among the threads, not their records. Each
 * thread then keeps statistics of its own columns over every record (read on the calling thread
 * and sent to each), so its tables are a share of the input's and nothing is merged at the end.
 * With records shared out, every thread held tables for every column and the merge cost as
 * much again: on 2,002 columns x 5,000 records two threads took longer than one, at twice the
 * memory (docs/benchmarks.md, "Wide inputs"). Narrower inputs keep sharing records: parsing them
 * is then the larger cost, and it is spread over the threads.
 */
export const COLUMN_SHARE_MIN = 256;

/** The columns [from, to) that lane `lane` of `lanes` keeps: contiguous runs whose sizes differ by at most one. */
export function columnShare(columns: number, lanes: number, lane: number): { from: number; to: number } {
  return { from: Math.floor((lane * columns) / lanes), to: Math.floor(((lane + 1) * columns) / lanes) };
}

/**
 * One result of column-sharing lanes (in lane order): their columns side by side, the records
 * and classes of lane 0 (every lane saw every record).
 */
export function joinColumnShares(columns: string[], results: ProfileTaskResult[]): ProfileTaskResult {
  const first = results[0];
  const joined = results.flatMap((r) => r.stats.columns);
  if (!first || joined.length !== columns.length || joined.some((c, i) => c !== columns[i]) || results.some((r) => r.stats.records !== first.stats.records)) {
    throw new RowdeckError('RDK_INTERNAL', `profile: the threads' column shares do not add up to the input's ${columns.length} columns.`);
  }
  return { stats: { ...first.stats, columns: columns.slice(), stats: results.flatMap((r) => r.stats.stats) }, strata: first.strata };
}

export interface ProfileTaskResult {
  stats: SerializedStats;
  /** Stratum key -> records (keys as shuffle makes them). */
  strata: [string, number][];
}

/** Counts records by the bytes of one plain field, without making a string per record. */
class ByteCounter {
  #table = new ByteIdTable();
  #keys: Buffer[] = [];
  #counts: number[] = [];

  get size(): number {
    return this.#keys.length;
  }

  /** Adds one to the count of b[s, e). */
  count(b: Buffer, s: number, e: number): void {
    let id = this.#table.lookup(b, s, e);
    if (id < 0) {
      id = this.#keys.length;
      this.#table.insert(b, s, e, id);
      this.#keys.push(Buffer.from(b.subarray(s, e)));
      this.#counts.push(0);
    }
    this.#counts[id]!++;
  }

  /** Calls fn with each key's latin1 text (the stratum key shuffle makes for a plain field) and count. */
  forEach(fn: (key: string, count: number) => void): void {
    this.#keys.forEach((k, id) => fn(k.toString('latin1'), this.#counts[id]!));
  }
}

/** Statistics and stratum counts of the batches it is given. */
export class ProfileTask {
  readonly #c: ProfileTaskConfig;
  readonly #stats: TableStats;
  /** Per input: wanted slot -> column index, or null when the slots are the columns. */
  readonly #maps: (Int32Array | null)[] = [];
  /** Per input: column index -> wanted slot or -1 (only where a map is set). */
  readonly #slots: (Int32Array | null)[] = [];
  readonly #strata = new Map<string, number>();
  readonly #fast = new ByteCounter();
  /** One plain stratify column without bins: counted by bytes. */
  readonly #single: boolean;
  readonly #keyRange: KeyRange = { start: 0, end: 0 };
  /** The columns this task keeps, [from, to) of `columns` (all but with column shares). */
  readonly #from: number;
  readonly #to: number;
  readonly #countsStrata: boolean;

  /** `lane`: which share of the columns this task keeps, where the config shares them. */
  constructor(c: ProfileTaskConfig, lane = 0) {
    this.#c = c;
    const share = c.columnShares > 0 ? columnShare(c.columns.length, c.columnShares, lane) : { from: 0, to: c.columns.length };
    this.#from = share.from;
    this.#to = share.to;
    this.#countsStrata = c.stratify.length > 0 && (c.columnShares === 0 || lane === 0);
    this.#stats = new TableStats(c.columns.slice(share.from, share.to));
    this.#single = c.stratify.length === 1 && c.stratify[0]!.edges === null;
  }

  /** Sets which columns input `input`'s batches hold (null: all, in order). */
  setInputColumns(input: number, map: number[] | null): void {
    this.#maps[input] = map === null ? null : Int32Array.from(map);
    if (map === null) this.#slots[input] = null;
    else {
      const slots = new Int32Array(this.#c.columns.length).fill(-1);
      map.forEach((col, w) => (slots[col] = w));
      this.#slots[input] = slots;
    }
  }

  addBatch(batch: RecordBatch, input: number): void {
    const map = this.#maps[input] ?? null;
    if (map === null) this.#stats.addBatch(batch, this.#from);
    else this.#addMapped(batch, map);
    if (this.#countsStrata) this.#countStrata(batch, input);
  }

  /** A batch holding some of the columns (a later JSON Lines input without some keys): the rest are missing. */
  #addMapped(batch: RecordBatch, map: Int32Array): void {
    const t = this.#stats;
    const W = batch.wanted;
    const from = this.#from;
    const to = this.#to;
    const present = new Uint8Array(this.#c.columns.length);
    for (let w = 0; w < W; w++) present[map[w]!] = 1;
    for (let i = 0; i < batch.count; i++) {
      for (let w = 0; w < W; w++) {
        const col = map[w]!;
        if (col < from || col >= to) continue;
        const k = i * W + w;
        t.addField(col - from, batch.data, batch.fieldStart[k]!, batch.fieldEnd[k]!, batch.fieldKind[k]! as FieldKind);
      }
      for (let col = from; col < to; col++) if (!present[col]) t.addField(col - from, batch.data, 0, 0, FieldKind.Missing);
      t.addRecordDone();
    }
  }

  #countStrata(b: RecordBatch, input: number): void {
    const slots = this.#slots[input] ?? null;
    const spec = this.#c.stratify;
    const slotOf = (j: number): number => (slots === null ? spec[j]!.column : slots[spec[j]!.column]!);
    if (this.#single) {
      const w = slotOf(0);
      const r = this.#keyRange;
      for (let i = 0; i < b.count; i++) {
        // Counted by its bytes where they are its key (keyBytes); anything else by its key.
        if (w >= 0 && keyBytes(b, i, w, r)) this.#fast.count(b.data, r.start, r.end);
        else this.#add(columnKey(b, i, w, spec[0]!, this.#c.files[input] ?? '<input>'));
      }
      this.#checkCount();
      return;
    }
    const ws = spec.map((_, j) => slotOf(j));
    const file = this.#c.files[input] ?? '<input>';
    for (let i = 0; i < b.count; i++) this.#add(stratumKey(b, i, ws, spec, file));
    this.#checkCount();
  }

  #add(key: string): void {
    this.#strata.set(key, (this.#strata.get(key) ?? 0) + 1);
  }

  #checkCount(): void {
    if (this.#strata.size + this.#fast.size > MAX_STRATA) throw tooManyStrata(this.#c.stratify.map((s) => s.name));
  }

  finish(): ProfileTaskResult {
    const strata = new Map(this.#strata);
    this.#fast.forEach((k, n) => strata.set(k, (strata.get(k) ?? 0) + n));
    return { stats: this.#stats.toTransfer(), strata: [...strata] };
  }
}

/** What the main thread sends a profile worker (src/workers/protocol.ts). */
export type { ProfileMessage } from '../../workers/protocol.js';
