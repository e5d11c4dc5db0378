/**
 * `profile()`: schema, column statistics and class balance of the inputs, in one streaming read.
 *
 *   main thread: open input ─▶ learn its columns ─▶ plain file: blocks parsed by the profile
 *                workers (io/blocks.ts, every column wanted); stdin, gzip: RecordReader here
 *                ─▶ packBatch ─▶ profile worker k (≤ 2 batches in flight each) ─▶ buffer back
 *   finish ─▶ each worker returns its serialised TableStats and stratum counts ─▶ exact merge
 *
 * Inputs of COLUMN_SHARE_MIN columns or more are shared out by column instead: every batch is
 * read here and goes to every worker, each keeps the statistics of its own run of columns, and
 * their tables are put side by side at the end (joinColumnShares), not merged.
 *
 * The statistics merge exactly and without regard to order (see core/stats.ts), and stratum
 * counts are sums, so the profile does not depend on the thread count or on which worker saw
 * which batch. Strata use the same keys as `shuffle` (fieldKey, quantile bin labels), so a
 * profile's classes are the classes a shuffle deals; warnings about classes too small for the
 * planned partitions or folds come from the same dealing tables a shuffle with the default seed
 * would build.
 *
 * Memory stays bounded: a few batches in flight per worker, value tables capped per column
 * (then a fixed-size distinct estimate), and one counter per stratum.
 */
import { statSync } from 'node:fs';
import { dealBalance, orderStrata, withinTolerance } from '../core/balance.js';
import { buildDealTable, countCells, seededStarts, type DealSpec } from '../core/deal.js';
import { deriveSecret, type Secret } from '../core/hash.js';
import { ByteIdTable } from '../core/byte-table.js';
import { TableStats, type ColumnSummary, type SerializedStats } from '../core/stats.js';
import { RowdeckError } from '../errors.js';
import { FieldKind, type BadRecordPolicy, type InputFormat, type RecordBatch, type RejectedRecord } from '../io/batch.js';
import { detectFormat, isPlainFile, isStreamInput, nameInput, openInput, ReadAhead } from '../io/input.js';
import { blockSizes, readInBlocks, type BlockLanes, type BlockMessage, type BlockReply, type InputTotals } from '../io/blocks.js';
import { WorkerLanes } from '../workers/lanes.js';
import { RecordReader, type RecordReaderOptions } from '../io/reader.js';
import { unknownColumn } from '../io/fields.js';
import { DEFAULT_SEED, optionSetting, resolveProfileOptions, type ProfileOptions, type ResolvedProfileOptions } from '../options.js';
import { chooseFormats } from '../io/sniff.js';
import { VERSION } from '../version.js';
import { computeBinEdges, type BinEdges } from './quantiles.js';
import { BatchSender, type BatchLanes } from './scatter.js';
import { columnKey, compareStratumKeys, describeStratum, keyBytes, keyParts, MAX_STRATA, MISSING_KEY, stratumKey, stratumValues, tooManyStrata, type KeyRange } from '../core/strata.js';
import { readInputs, smallFileSize, SmallInputSender, type SmallInputMessage, type SmallInputReply } from '../io/small-inputs.js';
import { resolveWorkerFile } from '../workers/worker-file.js';

export const PROFILE_VERSION = 1;
/** Blocks the workers parse (see readInBlocks). */
const PROFILE_BLOCK_BYTES = 1 << 20;
/** What the probe parses at a time while it looks for an input's columns. */
const PROBE_SLICE = 64 << 10;

async function* once(b: Buffer): AsyncGenerator<Buffer> {
  yield b;
}
/** Rejected records listed in a profile (all are counted). */
const MAX_LISTED_REJECTS = 20;
/** Classes listed one by one in warnings; the rest are summed up. */
const MAX_LISTED_CLASSES = 10;
/** More classes than this in a stratify column reads like an identifier, not a class. */
const MANY_CLASSES = 1000;

export type { ProfileOptions, ProfileProgress } from '../options.js';

export interface ProfileInput {
  path: string;
  format: InputFormat;
  /** Bytes read (after gzip decompression). */
  bytes: number;
  records: number;
  rejected: number;
}

export interface ProfileClass {
  /** The class's value per stratify column (null = missing); null when values are excluded. */
  value: (string | null)[] | null;
  count: number;
  /** count / records. */
  share: number;
}

export interface ProfileStrata {
  /** As given: `name` or `name:bins=Q`. */
  columns: string[];
  /** Every stratum (combination of classes) in value order, as a shuffle's manifest lists them. */
  values: ProfileClass[];
  /** Per stratify column, its own classes (summed over the other columns), in value order. */
  byColumn: { column: string; values: ProfileClass[] }[];
  /** Quantile bin edges of `name:bins=Q` columns (edges empty when values are excluded). */
  bins: BinEdges[];
}

export type ProfileWarningCode =
  | 'CLASS_BELOW_PARTITIONS'
  | 'CLASS_BELOW_FOLDS'
  | 'TOLERANCE_UNMET'
  | 'STRATIFY_MISSING'
  | 'MANY_CLASSES'
  | 'COLUMN_EMPTY'
  | 'SINGLE_VALUE'
  | 'REJECTED_RECORDS'
  | 'BINS_APPROXIMATE';

export interface ProfileWarning {
  code: ProfileWarningCode;
  /** The column concerned, where there is one. */
  column: string | null;
  message: string;
  /** Figures behind the message (counts, suggested settings). */
  details: Record<string, number | string | null>;
}

export interface Profile {
  profileVersion: number;
  tool: { name: 'rowdeck'; version: string };
  inputs: ProfileInput[];
  /** Column names (the first input's). */
  columnNames: string[];
  records: number;
  rejected: number;
  /** The first rejected records (file, line, code; the reason unless values are excluded). */
  rejects: { file: string; line: number; code: string; reason: string | null }[];
  columns: ColumnSummary[];
  strata: ProfileStrata | null;
  warnings: ProfileWarning[];
  /** The planned dealing the warnings were checked against. */
  plan: { partitions: number; folds: number; tolerance: number };
  /** True when data values were left out. */
  excludeValues: boolean;
  threads: number;
  timingsMs: { bins: number; read: number; total: number };
}

// --- the per-batch work (worker threads, or the calling thread) ------------------------------------

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

/** What the main thread sends a profile worker. */
export type ProfileMessage = { kind: 'columns'; input: number; map: number[] | null } | { kind: 'batch'; buffer: ArrayBuffer } | SmallInputMessage | BlockMessage;

// --- reading ---------------------------------------------------------------------------------------

/** How one input is read: every column of the first input wanted (or those a JSON Lines input has). */
interface InputPlan {
  reader: RecordReaderOptions;
  /** Wanted slot -> column of the first input, or null when the slots are the columns. */
  map: number[] | null;
}

/**
 * Learns an input's columns from its first chunks, read with a probe reader (a RecordReader must
 * know its wanted columns before it starts), and plans its real read. The chunks read are handed
 * back, so standard input is still read once.
 */
async function probeInput(
  o: ResolvedProfileOptions,
  k: number,
  first: { columns: string[]; csv: boolean } | null,
  onReject: (r: RejectedRecord) => void,
  it: AsyncIterator<Buffer>,
): Promise<{ plan: InputPlan; columns: string[]; held: Buffer[]; ended: boolean }> {
  const path = o.inputs[k]!;
  const format = detectFormat(path, o.format ?? undefined);
  const base = { format, header: o.header, file: nameInput(path), ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}) };
  // Probe: skip (not fail) so a bad first record is left to the real reader's policy.
  const probe = new RecordReader({ ...base, wanted: [], onBadRecord: 'skip' });
  const held: Buffer[] = [];
  let ended = false;
  while (probe.schema === null) {
    const r = await it.next();
    if (r.done) {
      ended = true;
      break;
    }
    held.push(r.value);
    // In slices: the schema is known after a header line or a first object, and a chunk may be
    // a whole small input (see ReadAhead), read in full below.
    for (let at = 0; at < r.value.length && probe.schema === null; at += PROBE_SLICE) probe.push(r.value.subarray(at, at + PROBE_SLICE));
  }
  const own = probe.schema?.columns ?? [];
  let wanted: string[];
  let map: number[] | null = null;
  let expected: string[] | undefined;
  const columns = first?.columns ?? own;
  if (first === null) wanted = columns;
  else if (first.csv && format !== 'jsonl') {
    wanted = columns;
    expected = columns;
  } else {
    // JSON Lines: keys of the first object that are columns of the first input; others are missing.
    wanted = columns.filter((c) => own.includes(c));
    map = wanted.length === columns.length ? null : wanted.map((c) => columns.indexOf(c));
  }
  return { plan: { reader: readerOptions(o, k, wanted, expected, onReject), map }, columns, held, ended };
}

/** How input k is read: the wanted columns, and for a CSV/TSV input after the first, the first's columns its header must give. */
function readerOptions(o: ResolvedProfileOptions, k: number, wanted: string[], expected: string[] | undefined, onReject: (r: RejectedRecord) => void): RecordReaderOptions {
  const path = o.inputs[k]!;
  return {
    format: detectFormat(path, o.format ?? undefined),
    header: o.header,
    file: nameInput(path),
    ...(o.delimiter !== undefined ? { delimiter: o.delimiter } : {}),
    wanted,
    onBadRecord: o.onBadRecord,
    onReject,
    ...(expected ? { expectedColumns: expected, expectedFrom: nameInput(o.inputs[0]!) } : {}),
  };
}

// --- orchestration -----------------------------------------------------------------------------------

export async function profile(options: ProfileOptions): Promise<Profile> {
  const o = resolveProfileOptions(options);
  // The inputs' format, as a shuffle of them would read them (see io/sniff.ts); inputs named
  // as different formats are each read as their name says (null).
  o.format = await chooseFormats(o.inputs, o.format, (v) => optionSetting(o.surface, 'format', v), 'profile', true);
  const t0 = Date.now();
  const secret = deriveSecret(DEFAULT_SEED);
  // Unknown (0: no bar) when any input is a stream: its size is not known before it ends.
  const totalBytes = o.inputs.some(isStreamInput) ? 0 : o.inputs.reduce((a, p) => {
    try {
      return a + statSync(p).size;
    } catch {
      return a; // reported with its path when opened
    }
  }, 0);

  // Quantile bins need their edges before any record has a stratum: the same first pass as
  // shuffle makes (so the labels match a shuffle with the default seed and memory budget).
  let binEdges: BinEdges[] = [];
  const binCols = o.stratify.filter((s) => s.bins > 0);
  if (binCols.length > 0) {
    o.onProgress?.({ stage: 'bins', done: 0, total: totalBytes, records: 0, elapsedMs: 0 });
    binEdges = await computeBinEdges({
      inputs: o.inputs,
      format: o.format ?? detectFormat(o.inputs[0]!),
      delimiter: o.delimiter,
      header: o.header,
      onBadRecord: o.onBadRecord,
      columns: binCols,
      secret,
    });
  }
  const binsMs = Date.now() - t0;
  const tRead = Date.now();

  const files = o.inputs.map(nameInput);
  const inputs: ProfileInput[] = o.inputs.map((path) => ({ path, format: detectFormat(path, o.format ?? undefined), bytes: 0, records: 0, rejected: 0 }));
  const rejects: Profile['rejects'] = [];
  const onReject = (r: RejectedRecord): void => {
    if (rejects.length < MAX_LISTED_REJECTS) rejects.push({ file: r.file, line: r.line, code: r.code, reason: o.excludeValues ? null : r.reason });
  };
  // Progress counts the bytes taken from each source (compressed ones for gzip), as the file
  // sizes in totalBytes do; the profile counts them decompressed.
  const taken = o.inputs.map(() => 0);
  const progress = (): void =>
    o.onProgress?.({ stage: 'read', done: taken.reduce((a, b) => a + b, 0), total: totalBytes, records: inputs.reduce((a, x) => a + x.records, 0), elapsedMs: Date.now() - tRead });

  // Started once the first input's columns are known (they size the statistics).
  type Lanes = WorkerLanes<ProfileMessage, BlockReply | SmallInputReply, ProfileTaskResult>;
  const run: { inline: ProfileTask | null; lanes: Lanes | null; sender: BatchSender | null; columnShares: boolean; small: SmallInputSender | null } = {
    inline: null,
    lanes: null,
    sender: null,
    columnShares: false,
    small: null,
  };
  const start = (cols: string[]): void => {
    const stratify = o.stratify.map((s) => {
      const column = cols.indexOf(s.name);
      if (column < 0) throw unknownColumn(s.name, cols, files[0]!);
      return { column, name: s.name, edges: s.bins > 0 ? (binEdges.find((b) => b.column === s.name)?.edges ?? []) : null };
    });
    const columnShares = o.threads >= 2 && cols.length >= COLUMN_SHARE_MIN ? o.threads : 0;
    const config: ProfileTaskConfig = { columns: cols, files, stratify, columnShares };
    if (o.threads === 0) run.inline = new ProfileTask(config);
    else {
      run.lanes = new WorkerLanes(resolveWorkerFile('profile-worker.js'), o.threads, config);
      run.sender = new BatchSender(run.lanes as unknown as BatchLanes, columnShares > 0);
      run.columnShares = columnShares > 0;
      // Small CSV/TSV inputs after the first are read and parsed by the workers (every column
      // wanted, as here), unless each worker needs every record (column shares).
      if (columnShares === 0 && o.onBadRecord === 'fail' && o.inputs.length > 1) run.small = new SmallInputSender(run.lanes);
    }
  };

  const send = async (batch: RecordBatch, input: number): Promise<void> => {
    if (run.inline) run.inline.addBatch(batch, input);
    else await run.sender!.send(batch, input);
  };

  try {
    let first = null as { columns: string[]; csv: boolean } | null;
    const blockBytes = blockSizes({ blockBytes: PROFILE_BLOCK_BYTES }).block;
    // The first input alone, then (its columns known) the rest: nothing is read ahead for inputs
    // the workers read themselves (see SmallInputSender).
    let ahead = new ReadAhead(o.inputs, blockBytes, 0);
    /** Reads input k here (whole if it was read ahead), or in blocks by the workers. */
    const readHere = async (k: number): Promise<void> => {
      const path = o.inputs[k]!;
      const seen = inputs[k]!;
      // Small files were read ahead, whole (see ReadAhead).
      const whole = await ahead.take(k);
      const source = { bytes: whole ? whole.length : 0 };
      const it = (whole ? once(whole) : openInput(path, source))[Symbol.asyncIterator]();
      let probed: Awaited<ReturnType<typeof probeInput>>;
      try {
        probed = await probeInput(o, k, first, onReject, it);
      } catch (err) {
        await it.return?.(undefined);
        throw err;
      }
      const { plan, columns, held, ended } = probed;
      if (first === null) {
        first = { columns, csv: plan.reader.format !== 'jsonl' };
        start(columns);
      }
      run.inline?.setInputColumns(k, plan.map);
      const lanes = run.lanes;
      // Every worker learns the input's columns before any of its records (each lane is in order).
      if (lanes) for (let lane = 0; lane < lanes.size; lane++) void lanes.runOn(lane, { kind: 'columns', input: k, map: plan.map }).catch(() => {});
      // Plain files are parsed by the workers in blocks; stdin and gzip are read here, and so is
      // every input when the workers share out columns (each of them takes every record).
      let totals: InputTotals | null = null;
      if (!whole && lanes && !run.columnShares && (await isPlainFile(path))) {
        await it.return?.(undefined);
        totals = await readInBlocks({
          path,
          input: k,
          reader: plan.reader,
          // Block work is answered with block replies (the small-input replies are SmallInputSender's).
          lanes: lanes as unknown as BlockLanes,
          // Every column is located, so a held block's arrays are ~5 times those of a shuffle's:
          // smaller blocks keep the memory near what the sequential read used.
          blockBytes: PROFILE_BLOCK_BYTES,
          sequential: (batch) => send(batch, k),
          onProgress: (bytes, records) => {
            seen.bytes = taken[k] = bytes;
            seen.records = records;
            progress();
          },
        });
      }
      if (totals) {
        seen.bytes = taken[k] = totals.bytes;
        seen.records = totals.records;
        seen.rejected = totals.rejected;
        return;
      }
      const reader = new RecordReader(plan.reader);
      const take = async (batch: RecordBatch | null): Promise<void> => {
        if (batch) await send(batch, k);
        seen.records = reader.stats.records;
        seen.bytes = reader.stats.bytes;
        taken[k] = source.bytes;
        seen.rejected = reader.stats.rejected;
        progress();
      };
      try {
        for (const chunk of held) await take(reader.push(chunk));
        if (!ended) {
          for (;;) {
            const r = await it.next();
            if (r.done) break;
            await take(reader.push(r.value));
          }
        }
        await take(reader.end());
      } finally {
        await it.return?.(undefined);
      }
    };
    await readInputs(
      o.inputs.length,
      () => run.small,
      (k) => {
        // Small CSV/TSV inputs after the first (whose columns they are checked against).
        const size = first?.csv && detectFormat(o.inputs[k]!, o.format ?? undefined) !== 'jsonl' ? smallFileSize(o.inputs[k]!) : null;
        if (size === null) return null;
        const seen = inputs[k]!;
        return {
          path: o.inputs[k]!,
          size,
          reader: readerOptions(o, k, first!.columns, first!.columns, onReject),
          done: (records, bytes) => {
            seen.records = records;
            seen.bytes = taken[k] = bytes;
            progress();
          },
        };
      },
      async (k) => {
        await readHere(k);
        // Its columns known, the rest are read ahead unless the workers read them.
        if (k === 0) ahead = new ReadAhead(o.inputs, blockBytes, run.small ? 0 : undefined);
      },
    );
    const cols: string[] = first?.columns ?? [];
    // The tasks' tables are let go once serialised (threads ended, the inline task dropped), so a
    // wide input's tables are not held twice while the profile is built from their copies.
    let results: ProfileTaskResult[];
    if (run.inline) {
      results = [run.inline.finish()];
      run.inline = null;
    } else if (run.lanes) {
      await run.sender?.drain();
      results = await run.lanes.finish();
      await run.lanes.destroy();
      if (run.columnShares) results = [joinColumnShares(cols, results)];
    } else results = [];
    const readMs = Date.now() - tRead;
    return buildProfile(o, { columns: cols, results, inputs, rejects, binEdges, secret, binsMs, readMs, t0 });
  } finally {
    await run.lanes?.destroy();
  }
}

// --- the result --------------------------------------------------------------------------------------

interface Gathered {
  columns: string[];
  results: ProfileTaskResult[];
  inputs: ProfileInput[];
  rejects: Profile['rejects'];
  binEdges: BinEdges[];
  secret: Secret;
  binsMs: number;
  readMs: number;
  t0: number;
}

function buildProfile(o: ResolvedProfileOptions, g: Gathered): Profile {
  // The first thread's tables are turned back into a table, and the others merged into it from
  // their serialised form: a wide input's tables are large.
  let stats: TableStats | null = null;
  for (const r of g.results) {
    if (stats === null) stats = TableStats.fromJSON(r.stats);
    else stats.mergeSerialized(r.stats);
  }
  stats ??= new TableStats(g.columns);
  const records = g.inputs.reduce((a, x) => a + x.records, 0);
  const rejected = g.inputs.reduce((a, x) => a + x.rejected, 0);
  const columns = stats.summary({ excludeValues: o.excludeValues });
  const warnings: ProfileWarning[] = [];

  let strata: ProfileStrata | null = null;
  let keys: string[] = [];
  let counts: number[] = [];
  if (o.stratify.length > 0) {
    const merged = new Map<string, number>();
    for (const r of g.results) for (const [k, n] of r.strata) merged.set(k, (merged.get(k) ?? 0) + n);
    if (merged.size > MAX_STRATA) throw tooManyStrata(o.stratify.map((s) => s.name));
    keys = [...merged.keys()].sort(compareStratumKeys);
    counts = keys.map((k) => merged.get(k)!);
    const share = (n: number): number => (records > 0 ? n / records : 0);
    const byColumn = o.stratify.map((s, j) => {
      const marginal = new Map<string, number>();
      keys.forEach((k, i) => {
        const part = keyParts(k)[j]!;
        marginal.set(part, (marginal.get(part) ?? 0) + counts[i]!);
      });
      const parts = [...marginal.keys()].sort(compareStratumKeys);
      return {
        column: s.bins > 0 ? `${s.name}:bins=${s.bins}` : s.name,
        values: parts.map((p) => ({ value: o.excludeValues ? null : stratumValues(p), count: marginal.get(p)!, share: share(marginal.get(p)!) })),
      };
    });
    strata = {
      columns: o.stratify.map((s) => (s.bins > 0 ? `${s.name}:bins=${s.bins}` : s.name)),
      values: keys.map((k, i) => ({ value: o.excludeValues ? null : stratumValues(k), count: counts[i]!, share: share(counts[i]!) })),
      byColumn,
      bins: g.binEdges.map((b) => (o.excludeValues ? { ...b, edges: [] } : b)),
    };
    warnings.push(...warnAboutStrata(o, keys, counts, records, g.secret));
  }
  warnings.push(...warnAboutColumns(o, columns, g.binEdges, rejected));
  return {
    profileVersion: PROFILE_VERSION,
    tool: { name: 'rowdeck', version: VERSION },
    inputs: g.inputs,
    columnNames: g.columns,
    records,
    rejected,
    rejects: g.rejects,
    columns,
    strata,
    warnings,
    plan: { partitions: o.partitions, folds: o.folds, tolerance: o.tolerance },
    excludeValues: o.excludeValues,
    threads: o.threads,
    timingsMs: { bins: g.binsMs, read: g.readMs, total: Date.now() - g.t0 },
  };
}

/** A class as messages name it (core/strata.ts); `index`: its place in strata.values, key order. */
function describeClass(o: ResolvedProfileOptions, key: string, index: number): string {
  return describeStratum(o.stratify.map((s) => s.name), o.excludeValues ? null : stratumValues(key), index);
}

/**
 * The largest deviation a shuffle with the default seed would reach, over parts and folds, for
 * `partitions` x `folds` (the same quotas and dealing order shuffle computes).
 */
export function predictDeviation(keys: string[], counts: number[], partitions: number, folds: number, secret: Secret): { deviation: number; stratum: number; kind: 'part' | 'fold' } {
  const order = orderStrata(keys, secret);
  const sizes = order.map((i) => counts[i]!);
  const deal: DealSpec = { splits: [{ name: '', weight: 1 }], exactCounts: false, partitions, folds };
  const table = buildDealTable(sizes, deal, seededStarts(secret, 1));
  const worst = dealBalance(countCells(table), sizes, { splits: 1, partitions, folds }, 'by-stratum');
  return { deviation: worst.deviation, stratum: worst.stratum < 0 ? -1 : order[worst.stratum]!, kind: worst.kind };
}

/** Largest n in [lo, from] (searching downwards, at most `tries` values) for which ok(n) holds, or null. */
function findLargest(from: number, lo: number, ok: (n: number) => boolean, tries = 200): number | null {
  for (let n = from, k = 0; n >= lo && k < tries; n--, k++) if (ok(n)) return n;
  return null;
}

function warnAboutStrata(o: ResolvedProfileOptions, keys: string[], counts: number[], records: number, secret: Secret): ProfileWarning[] {
  const out: ProfileWarning[] = [];
  const columnsText = o.stratify.map((s) => s.name).join(',');
  const listSmall = (limit: number, code: 'CLASS_BELOW_PARTITIONS' | 'CLASS_BELOW_FOLDS', what: string): void => {
    const small = keys.map((k, i) => i).filter((i) => counts[i]! < limit);
    small.slice(0, MAX_LISTED_CLASSES).forEach((i) => {
      out.push({
        code,
        column: columnsText,
        message: `${describeClass(o, keys[i]!, i)} has ${counts[i]} record${counts[i] === 1 ? '' : 's'}, fewer than the ${limit} ${what}: some ${what} get none of it.`,
        details: { class: o.excludeValues ? i + 1 : keys[i]!, count: counts[i]!, [what]: limit },
      });
    });
    if (small.length > MAX_LISTED_CLASSES) {
      out.push({
        code,
        column: columnsText,
        message: `… and ${small.length - MAX_LISTED_CLASSES} more class(es) with fewer than ${limit} records.`,
        details: { classes: small.length - MAX_LISTED_CLASSES, [what]: limit },
      });
    }
  };
  if (o.partitions > 1) listSmall(o.partitions, 'CLASS_BELOW_PARTITIONS', 'partitions');
  if (o.folds > 1) listSmall(o.folds, 'CLASS_BELOW_FOLDS', 'folds');

  // What a shuffle would reach, and what would work instead. Skipped when the tables get large.
  const P = o.partitions;
  const K = o.folds;
  if ((P > 1 || K > 1) && keys.length * P * K <= 5_000_000) {
    const worst = predictDeviation(keys, counts, P, K, secret);
    if (!withinTolerance(worst.deviation, o.tolerance)) {
      const budget = keys.length * K * P;
      const fits = (p: number, k: number): boolean => withinTolerance(predictDeviation(keys, counts, p, k, secret).deviation, o.tolerance);
      const tries = Math.max(1, Math.min(200, Math.floor(20_000_000 / Math.max(1, budget))));
      const partitions = P > 1 ? findLargest(P - 1, 1, (p) => fits(p, K), tries) : null;
      const folds = K > 1 ? findLargest(K - 1, 2, (k) => fits(P, k), tries) : null;
      const tolerance = Math.ceil(worst.deviation * 100) / 100;
      const hints: string[] = [];
      if (partitions !== null && P > 1) hints.push(`--partitions ${partitions}`);
      if (folds !== null && K > 1) hints.push(`--folds ${folds}`);
      hints.push(`--tolerance ${tolerance}`);
      const planned = [P > 1 ? `--partitions ${P}` : '', K > 1 ? `--folds ${K}` : ''].filter(Boolean).join(' ');
      const who = worst.stratum >= 0 ? describeClass(o, keys[worst.stratum]!, worst.stratum) : 'a class';
      out.push({
        code: 'TOLERANCE_UNMET',
        column: columnsText,
        message:
          `With ${planned}, a shuffle would miss the share of ${who} (${counts[worst.stratum] ?? 0} of ${records} records) by ${(worst.deviation * 100).toFixed(1)}% in some ${worst.kind}, ` +
          `more than the tolerance ${o.tolerance}, and stop. Would work: ${hints.join(', or ')}` +
          (o.stratify.length > 0 ? ', or merging rare classes into one.' : '.'),
        details: { deviation: worst.deviation, tolerance: o.tolerance, partitions, folds, toleranceNeeded: tolerance },
      });
    }
  }

  // Missing values form their own class; often that is a surprise.
  o.stratify.forEach((s, j) => {
    let missing = 0;
    keys.forEach((k, i) => {
      if (keyParts(k)[j] === MISSING_KEY) missing += counts[i]!;
    });
    if (missing > 0) {
      out.push({
        code: 'STRATIFY_MISSING',
        column: s.name,
        message: `${s.name} is missing in ${missing} record${missing === 1 ? '' : 's'} (${((missing / Math.max(1, records)) * 100).toFixed(1)}%); a shuffle deals them as a class of their own.`,
        details: { missing },
      });
    }
  });
  if (keys.length > MANY_CLASSES) {
    out.push({
      code: 'MANY_CLASSES',
      column: columnsText,
      message: `--stratify ${columnsText} makes ${keys.length} classes; is it an identifier? Stratify on a class column, use NAME:bins=Q for a numeric one, or --group to keep an entity's records together.`,
      details: { classes: keys.length },
    });
  }
  return out;
}

function warnAboutColumns(o: ResolvedProfileOptions, columns: ColumnSummary[], bins: BinEdges[], rejected: number): ProfileWarning[] {
  const out: ProfileWarning[] = [];
  for (const c of columns) {
    if (c.type === 'empty') {
      out.push({ code: 'COLUMN_EMPTY', column: c.name, message: `${c.name} has no values at all (${c.missing} missing).`, details: { missing: c.missing } });
    } else if (c.distinct === 1 && !c.approximate) {
      out.push({ code: 'SINGLE_VALUE', column: c.name, message: `${c.name} holds one value only${c.missing > 0 ? ` (and ${c.missing} missing)` : ''}.`, details: { count: c.count, missing: c.missing } });
    }
  }
  for (const b of bins) {
    if (!b.exact) {
      out.push({
        code: 'BINS_APPROXIMATE',
        column: b.column,
        message: `${b.column}: too many values to hold for exact quantiles; the bin edges come from a uniform sample of them.`,
        details: { values: b.values },
      });
    }
  }
  if (rejected > 0) {
    out.push({ code: 'REJECTED_RECORDS', column: null, message: `${rejected} record${rejected === 1 ? ' was' : 's were'} malformed and left out (--on-bad-record skip).`, details: { rejected } });
  }
  return out;
}
