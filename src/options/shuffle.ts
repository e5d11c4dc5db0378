/**
 * `shuffle()` and `rowdeck shuffle`: the options as a caller passes them (`ShuffleOptions`), their
 * table (flags, help, checks), and the resolver that turns them into what the engine uses
 * (`ResolvedShuffleOptions`), every default filled in and every combination checked.
 */
import { RowdeckError } from '../errors.js';
import type { BadRecordPolicy, InputFormat } from '../io/batch.js';
import { DEFAULT_GZIP_LEVEL } from '../io/gzip-members.js';
import type { SplitSpec } from '../core/deal.js';
import {
  DEFAULT_MEMORY,
  defaultThreads,
  delimiterOption,
  excludeValuesOption,
  formatOption,
  headerOption,
  inputsOption,
  memoryOption,
  onBadRecordOption,
  tempDirOption,
  threadsOption,
  withHelp,
} from './input.js';
import { defaultMemory } from '../io/memory-available.js';
import {
  booleanValue,
  checkerFor,
  choiceValue,
  columnsValue,
  functionValue,
  integerValue,
  numberValue,
  readOptions,
  surfaceOf,
  textValue,
  type Checker,
  type CommandSpec,
  type OptionDef,
  type Surface,
} from './spec.js';

export const DEFAULT_SEED = 'rowdeck-default-seed';
export const DEFAULT_TOLERANCE = 0.5;
export { DEFAULT_MEMORY };

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
  /** Any non-empty text. Default: a fixed seed, so a run is always reproducible. */
  seed?: string;
  /** Number of partition files (per split). Default 1. */
  partitions?: number;
  /** Column(s) to stratify on. A column may be written `name:bins=Q` for Q quantile bins. */
  stratify?: string | string[];
  /**
   * Largest allowed relative deviation of a stratum's share in any part or fold. Default 0.5.
   * Not applied with `assign: 'hash'` (class shares are then reported, not enforced).
   */
  tolerance?: number;
  /** Number of cross-validation folds; appends a fold column. */
  folds?: number;
  /** Name of the appended fold column. Default 'fold'. */
  foldColumn?: string;
  /**
   * Named splits: 'train=0.8,valid=0.1,test=0.1' or { train: 0.8, … }. Weights are fractions
   * (written with a decimal point; in an object, numbers that are not whole) that add up to 1
   * within 1e-9, or record counts (whole numbers); one split may be '*', the rest.
   */
  split?: string | Record<string, number | '*'>;
  /** Keep all records with the same value of this column in one part. */
  group?: string;
  /** Columns whose values identify a record (for `assign: 'hash'`, and stable keys). */
  key?: string | string[];
  /**
   * 'exact' quotas (default) or 'hash': a record's part is a pure function of its key and the
   * seed, so appended records never move old ones; class shares and part sizes are then what
   * the hash gives (reported in the manifest, not enforced).
   */
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
   * Worker threads. Default: the number of cores, or none for inputs under 32 MiB, 192 MiB on
   * two cores or fewer without `stats` (starting threads costs more than it saves there). 0 does
   * all the work on the calling thread.
   */
  threads?: number;
  /** Folder for spill files. Default: beside the output folder. */
  tempDir?: string;
  /** Default: from the file names, else from the first bytes (see docs/errors.md, "Formats"). */
  format?: InputFormat;
  delimiter?: string;
  /** First line is a header. Default true. */
  header?: boolean;
  /** Write gzip-compressed parts. */
  gzip?: boolean;
  /** Their compression level, 1 (fastest) to 9 (smallest). Default 6, gzip's own. Only with `gzip`. */
  gzipLevel?: number;
  onBadRecord?: BadRecordPolicy;
  /** Replace an existing non-empty output folder. */
  force?: boolean;
  /** Leave data values (class names, frequent values) out of the manifest. */
  excludeValues?: boolean;
  /**
   * Per-column statistics (type, missing, min/max/mean/sd, distinct and frequent values) of the
   * whole input and of every part, in the manifest. Default false: they cost about twice the
   * shuffle itself. `profile()` gives the input's statistics alone, faster.
   */
  stats?: boolean;
  /** Also write `report.html` (the manifest as a page of charts and tables) into the output folder. Default false. */
  report?: boolean;
  onProgress?: (e: ProgressEvent) => void;
  /**
   * Told, in one line each, what the run cleaned up that was not its own (work folders of killed
   * runs, a dead run's lock), warnings about the result (parts far from their sizes with
   * `group`) and, when a signal stops it, what it removed. Default: nothing is said, except the
   * line of a signal, which goes to stderr.
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
  /** Index of the split given as '*' (the rest) among record counts, or -1 (fractions: the rest is resolved here). */
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
  gzipLevel: number;
  onBadRecord: BadRecordPolicy;
  force: boolean;
  excludeValues: boolean;
  stats: boolean;
  report: boolean;
  onProgress: ((e: ProgressEvent) => void) | null;
  onNotice: ((text: string) => void) | null;
  /** Who passed the options: messages of the run name them as the caller wrote them. */
  surface: Surface;
}

// --- stratify ------------------------------------------------------------------------------------

const STRATIFY_EXPECTED = 'column names, as "a,b" or ["a", "b"], each given once; COLUMN:bins=Q with Q from 2 to 1000 for quantile bins';

/** `a,b:bins=4` -> columns with their bins; each column once. */
export const stratifyValue: Pick<OptionDef<StratifyColumn[]>, 'check' | 'text'> = {
  text: true,
  check: (v, c) => {
    let items: unknown[];
    if (typeof v === 'string') items = v.split(',');
    else if (Array.isArray(v)) items = v;
    else return c.fail(STRATIFY_EXPECTED, v);
    const cols = items.map((raw): StratifyColumn => {
      if (typeof raw !== 'string' || raw.trim() === '') return c.fail(STRATIFY_EXPECTED, v);
      const item = raw.trim();
      const m = /^(.*):bins=(.*)$/.exec(item);
      if (!m) return { name: item, bins: 0 };
      const bins = /^\d+$/.test(m[2]!) ? Number(m[2]) : NaN;
      if (!Number.isInteger(bins) || bins < 2 || bins > 1000 || m[1]!.trim() === '') return c.fail('COLUMN:bins=Q with Q an integer from 2 to 1000', item);
      return { name: m[1]!.trim(), bins };
    });
    const names = cols.map((x) => x.name);
    const dup = names.find((n, i) => names.indexOf(n) !== i);
    if (dup !== undefined) c.fail(`each column once (${JSON.stringify(dup)} is given twice)`, v);
    return cols;
  },
};

export { isReservedSplitName, parseSplits, SPLIT_SUM_SLACK, type ParsedSplits } from './splits.js';
import { parseSplits } from './splits.js';

// --- the table -----------------------------------------------------------------------------------

const D = 'Dealing';
const O = 'Output and resources';

/** Every option of shuffle(), in the order --help lists them. */
export const SHUFFLE_OPTIONS = {
  inputs: inputsOption,
  partitions: {
    cli: { flag: 'partitions', arg: 'N' },
    section: D,
    help: ['number of partition files (default 1)'],
    ...integerValue(1, 100000),
  },
  split: {
    cli: { flag: 'split', arg: 'NAME=W,...' },
    section: D,
    help: [
      'named splits. W is a fraction (with a decimal point: 0.8), a record',
      'count (a whole number: 8000) or * (the rest, one split at most).',
      'Fractions must add up to 1 (within 1e-9) unless one split is *;',
      'counts must add up to the records unless one is *; the two do not',
      'mix. E.g. train=0.8,valid=0.1,test=0.1 or test=2000,train=*',
    ],
    text: true,
    check: (v: unknown, c: Checker) => {
      // Checked in full, names and weights, then kept as given: the resolver reads it again.
      parseSplits(v as ShuffleOptions['split'], c);
      return v as NonNullable<ShuffleOptions['split']>;
    },
  },
  folds: {
    cli: { flag: 'folds', arg: 'K' },
    section: D,
    help: ['append a fold column (0..K-1), dealt jointly with the partitions'],
    ...integerValue(2, 1000),
  },
  foldColumn: {
    cli: { flag: 'fold-column', arg: 'NAME' },
    section: D,
    help: ['name of that column (default fold)'],
    ...textValue('a column name'),
  },
  stratify: {
    cli: { flag: 'stratify', arg: 'COL[,COL]' },
    section: D,
    help: [
      'keep the class mix of these columns in every part; a numeric column',
      'may be given as COL:bins=Q for Q quantile bins. Missing values form',
      'their own class.',
    ],
    check: (v: unknown, c: Checker) => {
      stratifyValue.check(v, c);
      return v as NonNullable<ShuffleOptions['stratify']>;
    },
    text: true,
  },
  tolerance: {
    cli: { flag: 'tolerance', arg: 'X' },
    section: D,
    help: [
      'largest allowed relative deviation of a class\'s share in any part or',
      'fold from its overall share (default 0.5). Checked before anything is',
      'written; the achieved value is recorded in the manifest. Not applied',
      'with --assign hash',
    ],
    ...numberValue(0, 'a number ≥ 0 (e.g. 0.1 for 10%)'),
  },
  group: {
    cli: { flag: 'group', arg: 'COL' },
    section: D,
    help: [
      'keep all records with the same COL value in one part (whole groups are',
      'dealt, balancing classes as well as they allow; part sizes follow the',
      'groups: a warning says when they stray past --tolerance or a part gets',
      'none); the groups are held in memory beside --memory while they are',
      'placed: ~30 bytes each',
    ],
    ...textValue('a column name'),
  },
  assign: {
    cli: { flag: 'assign', arg: 'exact|hash' },
    section: D,
    help: [
      'exact quotas (default), or hash: a record\'s part is a pure function of',
      'its --key and the seed, so appended records never move old ones. Hash',
      'enforces nothing else: class shares and part sizes are what the hash',
      'gives (about the weights, off by chance on small inputs); --stratify',
      'is then reported, not enforced, and --tolerance does not apply',
    ],
    ...choiceValue(['exact', 'hash'] as const),
  },
  key: {
    cli: { flag: 'key', arg: 'COL[,COL]' },
    section: D,
    help: ['columns that identify a record (required with --assign hash)'],
    check: (v: unknown, c: Checker) => {
      columnsValue().check(v, c);
      return v as NonNullable<ShuffleOptions['key']>;
    },
    text: true,
  },
  order: {
    cli: { flag: 'order', arg: 'random|spread|grouped' },
    section: D,
    help: [
      'order of the records inside each part. random (default): every',
      'order equally likely, also with --group and --assign hash (a group',
      'shares a part, not a place in it). spread: every class spread evenly',
      'through the part: after any number t of records each class has',
      'within one record of t x its share, so any window of w records holds',
      'each class within two of w x its share (needs --stratify; costs one',
      'more write and read of the output). grouped: the records of one',
      'group or key next to each other, in input order, the groups in',
      'random order (needs --group or --assign hash)',
    ],
    ...choiceValue(PART_ORDERS),
  },
  seed: {
    cli: { flag: 'seed', arg: 'TEXT' },
    section: D,
    help: ['any text (default: a fixed seed, printed, so every run is reproducible)'],
    ...textValue('non-empty text'),
  },
  format: formatOption,
  delimiter: delimiterOption,
  header: headerOption,
  onBadRecord: onBadRecordOption,
  out: {
    cli: { flag: 'out', arg: 'DIR' },
    section: O,
    required: 'the folder to write the parts and the manifest to',
    help: [
      'output folder: new, or empty (then it keeps its mode, group and setgid',
      'bit); locked while the run works, so a second run into it fails',
    ],
    ...textValue('an output folder path'),
  },
  force: {
    cli: { flag: 'force' },
    section: O,
    help: [
      'replace a previous output of rowdeck in DIR: only the files its',
      'manifest lists, and only once the new output is complete. Anything',
      'else in DIR stops the run (nothing is touched); refused where DIR is',
      '/, a mount point, the working or home folder or one above them, or',
      'holds an input',
    ],
    ...booleanValue(),
  },
  gzip: {
    cli: { flag: 'gzip' },
    section: O,
    help: [
      'compress parts (.gz) on several cores at once: each part is a series',
      'of gzip members of 1 MiB of its data (smaller with over 16 parts),',
      'which gunzip, zcat and any gzip reader read as one stream',
    ],
    ...booleanValue(),
  },
  gzipLevel: {
    cli: { flag: 'gzip-level', arg: 'N' },
    section: O,
    help: ["with --gzip: 1 (fastest) to 9 (smallest); default 6, gzip's own"],
    ...integerValue(1, 9),
  },
  memory: withHelp(memoryOption, [
    'memory budget, e.g. 64MiB, 2GiB (default: a quarter of the memory',
    'available at start, 128MiB to 16GiB; here now: {memory-default}).',
    'It decides the layout, never the output (see Memory and disk)',
  ]),
  threads: threadsOption,
  tempDir: withHelp(tempDirOption, [
    'where spill files go (default: beside DIR); they take about 1.3x',
    'the input (records plus 24 bytes each: more for short records) and',
    'are removed range by range as the parts are written; there are none',
    'where the spill fits in --memory (the memory layout)',
  ]),
  stats: {
    cli: { flag: 'stats' },
    section: O,
    help: [
      'add per-column statistics of the input and of every part to the',
      'manifest (types, missing, min/max/mean/sd, frequent values); this',
      'adds 35-70% to the run time. Within --memory: with many parts the',
      'parts are read back one at a time for theirs. Each column\'s table',
      'takes up to ~35 KB a thread beside it (2,000 columns: ~70 MB).',
      'rowdeck profile gives the input\'s alone',
    ],
    ...booleanValue(),
  },
  excludeValues: excludeValuesOption,
  report: {
    cli: { flag: 'report' },
    section: O,
    help: [
      'also write DIR/report.html, the manifest as a page of charts and',
      'tables (see rowdeck report --help)',
    ],
    ...booleanValue(),
  },
  onProgress: { cli: null, ...functionValue<(e: ProgressEvent) => void>() },
  onNotice: { cli: null, ...functionValue<(text: string) => void>() },
} satisfies { [K in keyof Required<ShuffleOptions>]: OptionDef<NonNullable<ShuffleOptions[K]>> };

export const SHUFFLE_SPEC: CommandSpec<ShuffleOptions> = {
  command: 'shuffle',
  table: SHUFFLE_OPTIONS,
  cliOnly: {
    json: { flag: 'json', section: O, help: ['print the manifest on stdout'] },
    quiet: { flag: 'quiet', section: O, help: ['no progress or summary on stderr (warnings still go there)'] },
    help: { flag: 'help', short: 'h', section: O, help: ['print this help'] },
  },
};

/** Checks shuffle()'s options and fills in every default; every rejection is a usage error naming the option as the caller spells it. */
export function resolveShuffleOptions(options: ShuffleOptions): ResolvedShuffleOptions {
  const surface = surfaceOf(options);
  const o = readOptions(SHUFFLE_SPEC, options, surface) as Partial<ShuffleOptions> & Pick<ShuffleOptions, 'inputs' | 'out'>;
  const c = (key: keyof ShuffleOptions): Checker => checkerFor(surface, SHUFFLE_OPTIONS, key);
  const spell = (key: keyof ShuffleOptions): string => c(key).name(key);
  const hash = c('assign').setting('assign', 'hash');
  const stratify = o.stratify === undefined ? [] : stratifyValue.check(o.stratify, c('stratify'));
  const key = o.key === undefined ? [] : columnsValue().check(o.key, c('key'));
  const group = o.group ?? null;
  const assign0 = o.assign ?? 'exact';
  if (assign0 === 'hash' && key.length === 0) {
    throw new RowdeckError('RDK_OPTION', `Invalid option ${spell('assign')}: ${hash} needs ${spell('key')}, the columns a record's part follows from`, { option: 'key' });
  }
  if (assign0 === 'hash' && group !== null) c('assign').fail(`"exact" with ${spell('group')} (groups are dealt as units, not by key hash)`, assign0);
  if (assign0 === 'hash' && o.tolerance !== undefined) {
    c('tolerance').fail(`no tolerance with ${hash} (a record's part follows from its key alone, so class shares are reported, not enforced)`, o.tolerance);
  }
  const order = o.order ?? 'random';
  if (order === 'grouped' && group === null && assign0 !== 'hash') {
    c('order').fail(`"random" or "spread" without ${spell('group')} or ${hash} ("grouped" keeps the records of one group or key together: give ${spell('group')}, or ${hash} with ${spell('key')})`, order);
  }
  if (order === 'spread' && stratify.length === 0) {
    c('order').fail(`"random" or "grouped" without ${spell('stratify')} ("spread" spreads every class evenly through each part: give ${spell('stratify')})`, order);
  }
  const { splits, counts, rest } = parseSplits(o.split, c('split'));
  if (assign0 === 'hash' && counts) {
    c('split').fail(`fractions with ${hash} (its shares are approximate, so record counts cannot be met)`, o.split);
  }
  const folds = o.folds ?? 1;
  if (o.gzipLevel !== undefined && o.gzip !== true) c('gzipLevel').fail(`it together with ${spell('gzip')} (the level is that of gzip-compressed parts)`, o.gzipLevel);
  if (o.foldColumn !== undefined && folds < 2) c('foldColumn').fail(`a name only together with ${spell('folds')} (it names the column the folds add)`, o.foldColumn);
  return {
    inputs: o.inputs,
    out: o.out,
    seed: o.seed ?? DEFAULT_SEED,
    seedWasDefault: o.seed === undefined,
    partitions: o.partitions ?? 1,
    stratify,
    tolerance: o.tolerance ?? DEFAULT_TOLERANCE,
    folds,
    foldColumn: folds > 1 ? (o.foldColumn ?? 'fold') : null,
    splits,
    splitsAreCounts: counts,
    restSplit: rest,
    group,
    key,
    assign: group !== null ? 'group' : assign0,
    order,
    memory: o.memory === undefined ? defaultMemory() : (o.memory as number),
    memoryIsDefault: o.memory === undefined,
    // Small inputs are shuffled on the calling thread unless threads are asked for (inlineMaxBytes).
    threads: o.threads ?? defaultThreads(o.inputs, o.stats === true),
    tempDir: o.tempDir ?? null,
    format: o.format ?? null,
    delimiter: o.delimiter ?? null,
    header: o.header ?? true,
    gzip: o.gzip ?? false,
    gzipLevel: o.gzipLevel ?? DEFAULT_GZIP_LEVEL,
    onBadRecord: o.onBadRecord ?? 'fail',
    force: o.force ?? false,
    excludeValues: o.excludeValues ?? false,
    stats: o.stats ?? false,
    report: o.report ?? false,
    onProgress: o.onProgress ?? null,
    onNotice: o.onNotice ?? null,
    surface,
  };
}
