/**
 * Per-part statistics (`--stats`), computed in one of two places, with the same result:
 *
 * - in the lanes, as stage 2 deals (src/engine/gather.ts): each lane keeps a TableStats for every
 *   part and adds each bucket's slice of that part's output, and the lanes' tables are merged at
 *   the end. Nothing is read twice, but every lane holds every part's tables at once.
 * - after the dealing, from the part files: one part at a time on each lane, read back (from the
 *   page cache, as a rule: they were just written) with the same reader. Memory is one table per
 *   lane, whatever the number of parts.
 *
 * A part's tables hold up to the distinct cap of values a column (then a fixed-size estimate):
 * measured ~0.63 MiB a part and lane for the 10 columns of the benchmark files (values of up to
 * ~60 bytes; 1.2 MiB before the value tables were made leaner), and ~100 MiB more at the peak
 * for 64 parts on two lanes than for 8 (~80 KB a column and lane), hence STATS_BYTES_PER_COLUMN.
 * The lanes keep the tables only while the parts times the lanes fit in a quarter of the memory
 * budget (or in READ_BACK_BYTES, what reading back costs itself); past that, the parts are read
 * back. Both ways feed the same records to the same kind
 * of table, and TableStats merges exactly and without regard to order, so the manifest does not
 * depend on which was used (test/shuffle.invariants.test.ts runs both and compares them).
 */
import { TableStats, type ColumnSummary } from '../core/stats.js';
import { openInput } from '../io/input.js';
import { batchesOf, RecordReader } from '../io/reader.js';
import type { GatherPlan } from './plan.js';
import { flags } from '../flags.js';

/** Memory a part's statistics take per column and lane, for the choice above (measured, rounded up). */
export const STATS_BYTES_PER_COLUMN = 80 * 1024;

/**
 * What reading the parts back takes beyond the dealing, measured: 15-35 MB over a run's peak
 * (one reader, its buffers and one table a lane). Below this, the lanes keep the tables.
 */
export const READ_BACK_BYTES = 32 * 1024 * 1024;

/** A part to read back: its file (gzip or not, found from its bytes) and the length of its header line. */
export interface PartStatsTask {
  partFile: string;
  headerBytes: number;
  /** For the part's summary (made on the lane, see PartStatsResult). */
  excludeValues: boolean;
}

/**
 * A part's statistics read back: its summary for the manifest, made where it was read. Its table
 * stays there too, merged into the lane's table of every part it read (handed over once, when the
 * lane finishes, see GatherFinal): sending each part's table to the calling thread to be merged
 * there kept that thread busy receiving and merging while the lanes waited (wide inputs).
 */
export interface PartStatsResult {
  summary: ColumnSummary[];
}

/**
 * Whether the lanes keep every part's statistics while they deal: only while those tables, at
 * STATS_BYTES_PER_COLUMN a column, fit in a quarter of the budget (or in what reading the parts
 * back would take, if that is more). `ROWDECK_PART_STATS=lanes` or
 * `=files` forces one way (tests compare the two).
 */
export function statsInLanes(columns: number, parts: number, lanes: number, memory: number): boolean {
  const forced = flags.partStats;
  if (forced === 'lanes') return true;
  if (forced === 'files') return false;
  return columns * STATS_BYTES_PER_COLUMN * parts * Math.max(1, lanes) <= Math.max(memory / 4, READ_BACK_BYTES);
}

let partReaderOf: { plan: GatherPlan; reader: RecordReader } | null = null;

/**
 * A reader of the parts' CSV/TSV output (the input's columns, then the fold column if any) that
 * locates the statistics' columns; kept for the plan, since every bucket uses the same one.
 */
export function partReader(plan: GatherPlan): RecordReader {
  if (partReaderOf?.plan === plan) return partReaderOf.reader;
  const reader = newPartReader(plan);
  partReaderOf = { plan, reader };
  return reader;
}

function newPartReader(plan: GatherPlan): RecordReader {
  if (plan.format === 'jsonl') {
    // Each line an object; the wanted keys are found in each (a fold key added to the records is
    // not one of them), and their values read as the input's reader read them: a part's figures
    // are the input's for the same records.
    const reader = new RecordReader({ format: 'jsonl', header: false, wanted: plan.statsColumns, file: '(part output)', onBadRecord: 'fail' });
    reader.adoptSchema({ format: 'jsonl', columns: plan.statsColumns, headerBytes: null, lineEnding: plan.lineEnding, delimiter: 0 });
    return reader;
  }
  const delimiter = String.fromCharCode(plan.delimiter);
  const format = plan.format === 'tsv' ? 'tsv' : 'csv';
  const reader = new RecordReader({ format, delimiter, header: false, wanted: plan.statsColumns, file: '(part output)', onBadRecord: 'fail' });
  const columns = plan.foldColumn !== null ? [...plan.statsColumns, plan.foldColumn] : plan.statsColumns;
  reader.adoptSchema({ format, columns, headerBytes: null, lineEnding: plan.lineEnding, delimiter: plan.delimiter });
  return reader;
}

/**
 * One part's statistics, read back from its file (see the top of this file), into an empty
 * table of the plan's columns (PartStatsGather.take; its done() gives the module back).
 */
export async function statsOfPartFile(plan: GatherPlan, task: PartStatsTask, stats: TableStats): Promise<TableStats> {
  for await (const batch of batchesOf(newPartReader(plan), openInput(task.partFile), task.headerBytes)) stats.addBatch(batch);
  return stats;
}

/**
 * The column statistics of the parts one thread reads (a shuffle's lane reading parts back,
 * or `verify`'s): each part's table is merged into the thread's table of every part it read
 * (handed over once, at the end) and then reused for the next part (TableStats' `recycle`).
 * Sending every part's table to the calling thread to be merged there kept that thread busy
 * while the others waited, and a wide output's tables are large (2,002 columns: ~64 MB a part
 * of 625 records), as is growing them from empty for each part.
 */
export class PartStatsGather {
  readonly #columns: string[];
  readonly #spare: TableStats[] = [];
  readonly whole: TableStats;

  constructor(columns: string[]) {
    this.#columns = columns;
    this.whole = new TableStats(columns);
  }

  /** A table for the next part. */
  take(): TableStats {
    return new TableStats(this.#columns, {}, this.#spare.pop());
  }

  /** A part read to its end: its summary; its figures join the whole. */
  done(t: TableStats, excludeValues: boolean): ColumnSummary[] {
    t.releaseKernel();
    const summary = t.summary({ excludeValues });
    this.whole.merge(t);
    this.#spare.push(t);
    return summary;
  }

  /** A part that could not be read to its end: its figures count nowhere. */
  drop(t: TableStats): void {
    t.releaseKernel();
    this.#spare.push(t);
  }
}
