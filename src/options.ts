/**
 * Options as a caller may pass them (`ShuffleOptions`) and as the engine uses them
 * (`ResolvedShuffleOptions`). `resolveShuffleOptions` is the only place that validates; every
 * rejection is an ERR_OPTION with the pattern: Invalid option "name": expected …, got "…".
 */
import { availableParallelism } from 'node:os';
import { RowdeckError } from './errors.js';
import { smallInputs } from './io/input.js';
import { defaultMemory } from './io/memory-available.js';
import { RESERVED_OUTPUT_NAMES } from './io/output-folder.js';
import type { BadRecordPolicy, InputFormat } from './io/batch.js';
import type { SplitSpec } from './core/deal.js';

export const DEFAULT_SEED = 'rowdeck-default-seed';
export const DEFAULT_TOLERANCE = 0.5;

export interface ProgressEvent {
  stage: 'scatter' | 'plan' | 'gather' | 'order' | 'stats' | 'finish';
  /**
   * Work done and total in the stage's unit: bytes for scatter, buckets for gather, parts for
   * order (`order: 'spread'`: each part put in order) and stats (--stats with more parts than
   * the lanes keep statistics for: the parts read back).
   */
  done: number;
  total: number;
  records: number;
  elapsedMs: number;
  /** How the records are kept between the stages (`shuffle --help`, "Memory and disk"): in memory, in spill files, or in spill files split once more in stage 2. */
  layout?: 'memory' | 'spill' | 'multi-pass';
  /** Stage gather in the multi-pass layout: buckets split so far (each scattered once more before it is dealt). */
  splits?: number;
}

export interface ShuffleOptions {
  /** Input files; '-' reads standard input. */
  inputs: string[];
  /** Output folder; must not exist or be empty unless `force`. */
  out: string;
  /** Any text. Default: a fixed seed, so a run is always reproducible. */
  seed?: string;
  /** Number of partition files (per split). Default 1. */
  partitions?: number;
  /** Column(s) to stratify on. A column may be written `name:bins=Q` for Q quantile bins. */
  stratify?: string | string[];
  /** Largest allowed relative deviation of a stratum's share in any part. Default 0.5. */
  tolerance?: number;
  /** Number of cross-validation folds; appends a fold column. */
  folds?: number;
  /** Name of the appended fold column. Default 'fold'. */
  foldColumn?: string;
  /** Named splits, e.g. 'train=0.8,valid=0.1,test=0.1', or { train: 0.8, … }, or counts. */
  split?: string | Record<string, number | '*'>;
  /** Keep all records with the same value of this column in one part. */
  group?: string;
  /** Columns whose values identify a record (for `assign: 'hash'`, and stable keys). */
  key?: string | string[];
  /** 'exact' quotas (default) or 'hash': part = pure function of key and seed. */
  assign?: 'exact' | 'hash';
  /**
   * Order of the records inside each part: 'random' (default: a uniformly random order, also
   * with `group` or `assign: 'hash'`, whose records share a part but not a place in it),
   * 'spread' (every class spread evenly through each part; see docs/design.md for the exact
   * guarantee) or 'grouped' (records of one group or key next to each other, in input order,
   * groups in random order; needs `group` or `assign: 'hash'`).
   */
  order?: PartOrder;
  /**
   * Memory budget in bytes, or text like '64MiB', '1GiB'. Default: a quarter of the memory
   * available when the run starts, from 128 MiB to 16 GiB (src/io/memory-available.ts).
   */
  memory?: number | string;
  /**
   * Worker threads. Default: the number of cores, or none for inputs under 32 MiB (starting
   * threads costs more than it saves there). 0 does all the work on the calling thread.
   */
  threads?: number;
  /** Folder for spill files. Default: beside the output folder. */
  tempDir?: string;
  format?: InputFormat;
  delimiter?: string;
  /** First line is a header. Default true. */
  header?: boolean;
  /** Write gzip-compressed parts. */
  gzip?: boolean;
  onBadRecord?: BadRecordPolicy;
  /** Replace an existing non-empty output folder. */
  force?: boolean;
  /** Leave data values (class names, frequent values) out of the manifest. */
  excludeValues?: boolean;
  /**
   * Per-column statistics (type, missing, min/max/mean/sd, distinct and frequent values) of the
   * whole input and of every part, in the manifest. Default false: they cost about twice the
   * shuffle itself (~2 µs per record of 10 columns on the benchmark machine). `profile()` gives
   * the input's statistics alone, faster.
   */
  stats?: boolean;
  /** Also write `report.html` (the manifest as a page of charts and tables) into the output folder. Default false. */
  report?: boolean;
  onProgress?: (e: ProgressEvent) => void;
  /**
   * Told, in one line each, what the run cleaned up that was not its own (work folders of killed
   * runs, a dead run's lock) and, when a signal stops it, what it removed. Default: nothing is
   * said, except the line of a signal, which goes to stderr.
   */
  onNotice?: (text: string) => void;
}

export type PartOrder = 'random' | 'spread' | 'grouped';
export const PART_ORDERS: readonly PartOrder[] = ['random', 'spread', 'grouped'];

export interface StratifyColumn {
  name: string;
  /** Quantile bins for a numeric column, or 0 for plain values. */
  bins: number;
}

export interface ResolvedShuffleOptions {
  inputs: string[];
  out: string;
  seed: string;
  seedWasDefault: boolean;
  partitions: number;
  stratify: StratifyColumn[];
  tolerance: number;
  folds: number;
  foldColumn: string | null;
  splits: SplitSpec[];
  splitsAreCounts: boolean;
  /** Index of the split given as '*' (the rest), or -1. */
  restSplit: number;
  group: string | null;
  key: string[];
  assign: 'exact' | 'hash' | 'group';
  order: PartOrder;
  memory: number;
  /** No budget was given: `memory` is the machine's default. */
  memoryIsDefault: boolean;
  threads: number;
  tempDir: string | null;
  format: InputFormat | null;
  delimiter: string | null;
  header: boolean;
  gzip: boolean;
  onBadRecord: BadRecordPolicy;
  force: boolean;
  excludeValues: boolean;
  stats: boolean;
  report: boolean;
  onProgress: ((e: ProgressEvent) => void) | null;
  onNotice: ((text: string) => void) | null;
}

export function invalid(name: string, expected: string, got: unknown): RowdeckError {
  const shown = typeof got === 'string' ? JSON.stringify(got) : String(got);
  return new RowdeckError('ERR_OPTION', `Invalid option "${name}": expected ${expected}, got ${shown}`, { option: name });
}

function integerOption(name: string, v: unknown, min: number, max: number, dflt: number): number {
  if (v === undefined) return dflt;
  const n = typeof v === 'string' && /^\s*\d+\s*$/.test(v) ? Number(v) : v;
  if (typeof n !== 'number' || !Number.isInteger(n) || n < min || n > max) {
    throw invalid(name, `an integer from ${min} to ${max}`, v);
  }
  return n;
}

const UNITS: Record<string, number> = {
  '': 1, b: 1, k: 1e3, kb: 1e3, m: 1e6, mb: 1e6, g: 1e9, gb: 1e9,
  kib: 1024, mib: 1024 ** 2, gib: 1024 ** 3, tib: 1024 ** 4,
};

/** Parses sizes like `64MiB`, `1.5GiB`, `500MB`, `1048576`. */
export function parseSize(name: string, v: number | string): number {
  if (typeof v === 'number') {
    if (Number.isFinite(v) && v > 0) return Math.floor(v);
    throw invalid(name, 'a size such as 64MiB or 1GiB', v);
  }
  const m = /^\s*(\d+(?:\.\d+)?)\s*([a-zA-Z]*)\s*$/.exec(v);
  const unit = m ? UNITS[m[2]!.toLowerCase()] : undefined;
  if (!m || unit === undefined) throw invalid(name, 'a size such as 64MiB or 1GiB', v);
  return Math.floor(Number(m[1]) * unit);
}

function listOption(v: string | string[] | undefined): string[] {
  if (v === undefined) return [];
  const arr = Array.isArray(v) ? v : splitList(v);
  return arr.map((s) => s.trim()).filter((s) => s.length > 0);
}

/** Splits 'a,b,c' on commas; a column name containing a comma can be passed as an array instead. */
function splitList(s: string): string[] {
  return s.split(',');
}

export function parseStratify(v: string | string[] | undefined): StratifyColumn[] {
  return listOption(v).map((item) => {
    const m = /^(.*):bins=(.*)$/.exec(item);
    if (!m) return { name: item, bins: 0 };
    const bins = Number(m[2]);
    if (!Number.isInteger(bins) || bins < 2 || bins > 1000) throw invalid('stratify', `COLUMN:bins=Q with Q an integer from 2 to 1000`, item);
    return { name: m[1]!, bins };
  });
}

/** Stems of the files rowdeck writes into an output folder: a split named so (or so followed by ".") could take their place. */
const RESERVED_STEMS = RESERVED_OUTPUT_NAMES.map((n) => n.slice(0, n.indexOf('.')));

export function isReservedSplitName(name: string): boolean {
  const lower = name.toLowerCase();
  return RESERVED_STEMS.some((stem) => lower === stem || lower.startsWith(`${stem}.`));
}

export function parseSplits(v: ShuffleOptions['split']): { splits: SplitSpec[]; counts: boolean; rest: number } {
  if (v === undefined) return { splits: [{ name: '', weight: 1 }], counts: false, rest: -1 };
  const entries: [string, string][] =
    typeof v === 'string'
      ? v.split(',').map((p) => {
          const i = p.indexOf('=');
          if (i <= 0) throw invalid('split', 'NAME=WEIGHT pairs such as train=0.8,valid=0.1,test=0.1', v);
          return [p.slice(0, i).trim(), p.slice(i + 1).trim()];
        })
      : Object.entries(v).map(([k, w]) => [k, String(w)]);
  if (entries.length < 2) throw invalid('split', 'at least two NAME=WEIGHT pairs', typeof v === 'string' ? v : JSON.stringify(v));
  const names = new Set<string>();
  let rest = -1;
  const splits = entries.map(([name, w], i) => {
    if (!/^[A-Za-z0-9][A-Za-z0-9_.-]*$/.test(name)) throw invalid('split', 'split names of letters, digits, "_", "-" or "." (a name, not a path), starting with a letter or digit', name);
    if (isReservedSplitName(name)) throw invalid('split', `split names other than those of the files rowdeck writes itself (${RESERVED_STEMS.join(', ')}, in any case)`, name);
    if (names.has(name)) throw invalid('split', 'distinct split names', name);
    names.add(name);
    if (w === '*') {
      if (rest >= 0) throw invalid('split', 'at most one split given as * (the rest)', w);
      rest = i;
      return { name, weight: 0 };
    }
    const n = Number(w);
    if (w === '' || !Number.isFinite(n) || n < 0) throw invalid('split', `a non-negative weight for "${name}"`, w);
    return { name, weight: n };
  });
  const weights = splits.map((s) => s.weight);
  const counts = rest >= 0 || weights.every((x) => Number.isInteger(x) && x >= 1) && weights.some((x) => x > 1);
  if (!counts) {
    const sum = weights.reduce((a, b) => a + b, 0);
    if (Math.abs(sum - 1) > 1e-9 && sum <= 0) throw invalid('split', 'weights that add up to more than 0', typeof v === 'string' ? v : JSON.stringify(v));
  } else if (weights.some((x, i) => i !== rest && !Number.isInteger(x))) {
    throw invalid('split', 'record counts (whole numbers) when one split is * or any weight is above 1', typeof v === 'string' ? v : JSON.stringify(v));
  }
  return { splits, counts, rest };
}

export function resolveShuffleOptions(o: ShuffleOptions): ResolvedShuffleOptions {
  if (!o || typeof o !== 'object') throw invalid('options', 'an object', o);
  if (!Array.isArray(o.inputs) || o.inputs.length === 0 || o.inputs.some((x) => typeof x !== 'string' || x === '')) {
    throw invalid('inputs', 'one or more input paths', o.inputs);
  }
  if (o.inputs.filter((x) => x === '-').length > 1) throw invalid('inputs', 'standard input (-) at most once', o.inputs.join(' '));
  if (typeof o.out !== 'string' || o.out === '') throw invalid('out', 'an output folder path', o.out);
  const seedWasDefault = o.seed === undefined;
  const seed = o.seed ?? DEFAULT_SEED;
  if (typeof seed !== 'string') throw invalid('seed', 'text', seed);
  const partitions = integerOption('partitions', o.partitions, 1, 100000, 1);
  const folds = integerOption('folds', o.folds, 2, 1000, 1);
  // Small inputs are shuffled on the calling thread unless threads are asked for (INLINE_MAX_BYTES).
  // The default looks at the inputs' sizes: only when no count is given.
  const threads = integerOption('threads', o.threads, 0, 256, o.threads !== undefined ? 0 : smallInputs(o.inputs) ? 0 : Math.max(1, availableParallelism()));
  const tolerance = o.tolerance ?? DEFAULT_TOLERANCE;
  if (typeof tolerance !== 'number' || !(tolerance >= 0) || !Number.isFinite(tolerance)) throw invalid('tolerance', 'a number ≥ 0 (e.g. 0.1 for 10%)', o.tolerance);
  const memory = o.memory === undefined ? defaultMemory() : parseSize('memory', o.memory);
  if (memory < 1024 * 1024) throw invalid('memory', 'at least 1MiB', o.memory);
  const stratify = parseStratify(o.stratify);
  const key = listOption(o.key);
  const group = o.group ?? null;
  if (group !== null && (typeof group !== 'string' || group === '')) throw invalid('group', 'a column name', group);
  const assign0 = o.assign ?? 'exact';
  if (assign0 !== 'exact' && assign0 !== 'hash') throw invalid('assign', '"exact" or "hash"', assign0);
  if (assign0 === 'hash' && key.length === 0) throw invalid('key', 'one or more key columns with assign "hash" (the part must follow from the key)', o.key ?? '');
  if (assign0 === 'hash' && group !== null) throw invalid('assign', '"exact" with group (groups are dealt as units)', assign0);
  const order = o.order ?? 'random';
  if (!PART_ORDERS.includes(order)) throw invalid('order', '"random", "spread" or "grouped"', order);
  if (order === 'grouped' && group === null && assign0 !== 'hash') {
    throw invalid('order', '"random" or "spread" without group or assign "hash" ("grouped" keeps the records of one group or key together: give group, or assign "hash" with key)', order);
  }
  if (order === 'spread' && stratify.length === 0) {
    throw invalid('order', '"random" or "grouped" without stratify ("spread" spreads every class evenly through each part: give stratify)', order);
  }
  const { splits, counts, rest } = parseSplits(o.split);
  if (assign0 === 'hash' && counts) throw invalid('split', 'weights as fractions with assign "hash" (its shares are approximate, so record counts cannot be met)', typeof o.split === 'string' ? o.split : JSON.stringify(o.split));
  const foldColumn = folds > 1 ? (o.foldColumn ?? 'fold') : null;
  if (foldColumn !== null && (typeof foldColumn !== 'string' || foldColumn === '')) throw invalid('foldColumn', 'a column name', o.foldColumn);
  if (o.format !== undefined && !['csv', 'tsv', 'jsonl'].includes(o.format)) throw invalid('format', '"csv", "tsv" or "jsonl"', o.format);
  if (o.delimiter !== undefined && (typeof o.delimiter !== 'string' || Buffer.byteLength(o.delimiter) !== 1 || o.delimiter === '"' || o.delimiter === '\n' || o.delimiter === '\r')) {
    throw invalid('delimiter', 'one single-byte character other than a quote or a line end', o.delimiter);
  }
  const onBadRecord = o.onBadRecord ?? 'fail';
  if (!['fail', 'skip', 'quarantine'].includes(onBadRecord)) throw invalid('onBadRecord', '"fail", "skip" or "quarantine"', onBadRecord);
  if (o.onProgress !== undefined && typeof o.onProgress !== 'function') throw invalid('onProgress', 'a function', typeof o.onProgress);
  if (o.onNotice !== undefined && typeof o.onNotice !== 'function') throw invalid('onNotice', 'a function', typeof o.onNotice);
  return {
    inputs: [...o.inputs],
    out: o.out,
    seed,
    seedWasDefault,
    partitions,
    stratify,
    tolerance,
    folds,
    foldColumn,
    splits,
    splitsAreCounts: counts,
    restSplit: rest,
    group,
    key,
    assign: group !== null ? 'group' : assign0,
    order,
    memory,
    memoryIsDefault: o.memory === undefined,
    threads,
    tempDir: o.tempDir ?? null,
    format: o.format ?? null,
    delimiter: o.delimiter ?? null,
    header: o.header ?? true,
    gzip: o.gzip ?? false,
    onBadRecord,
    force: o.force ?? false,
    excludeValues: o.excludeValues ?? false,
    stats: o.stats ?? false,
    report: o.report ?? false,
    onProgress: o.onProgress ?? null,
    onNotice: o.onNotice ?? null,
  };
}
