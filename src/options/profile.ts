/**
 * `profile()` and `rowdeck profile`: options, table and resolver. The input options, stratify,
 * partitions, folds and tolerance are shuffle's own definitions, so a profile accepts exactly
 * what a shuffle with the same settings would.
 */
import type { InputFormat } from '../io/batch.js';
import {
  DEFAULT_MEMORY,
  defaultThreads,
  delimiterOption,
  excludeValuesOption,
  formatOption,
  headerOption,
  inputsOption,
  memoryOption,
  threadsOption,
  withHelp,
} from './input.js';
import { DEFAULT_TOLERANCE, SHUFFLE_OPTIONS, stratifyValue, type StratifyColumn } from './shuffle.js';
import { checkerFor, functionValue, readOptions, surfaceOf, type Checker, type CommandSpec, type OptionDef, type Surface } from './spec.js';

export interface ProfileProgress {
  stage: 'bins' | 'read';
  /** Input bytes read so far, and the total (file sizes; 0 when unknown, e.g. stdin). */
  done: number;
  total: number;
  records: number;
  elapsedMs: number;
}

export interface ProfileOptions {
  /** Input files; '-' reads standard input. */
  inputs: string[];
  /** Column(s) whose class balance to show; `name:bins=Q` for Q quantile bins of a numeric column. */
  stratify?: string | string[];
  /** Partitions you plan: warns about classes that cannot be spread over them. Default 1. */
  partitions?: number;
  /** Folds you plan (≥ 2): warns about classes that cannot be spread over them. */
  folds?: number;
  /** Tolerance the warnings check against, as shuffle's `tolerance`. Default 0.5. */
  tolerance?: number;
  format?: InputFormat;
  delimiter?: string;
  /** First line is a header (CSV/TSV). Default true. */
  header?: boolean;
  /** 'fail' (default) stops at the first malformed record; 'skip' counts and lists it. */
  onBadRecord?: 'fail' | 'skip';
  /** Leave data values out: min/max, frequent values, class names, bin edges, reject reasons. */
  excludeValues?: boolean;
  /**
   * Worker threads for the statistics. Default: the number of cores, or none for inputs under
   * 32 MiB; 0 works on the calling thread.
   */
  threads?: number;
  /** Memory budget of the first pass for quantile bins (`name:bins=Q`), as shuffle's. Default 512 MiB. */
  memory?: number | string;
  onProgress?: (e: ProfileProgress) => void;
}

export interface ResolvedProfileOptions {
  inputs: string[];
  stratify: StratifyColumn[];
  partitions: number;
  folds: number;
  tolerance: number;
  format: InputFormat | null;
  delimiter: string | undefined;
  header: boolean;
  onBadRecord: 'fail' | 'skip';
  excludeValues: boolean;
  threads: number;
  memory: number;
  onProgress: ((e: ProfileProgress) => void) | null;
  surface: Surface;
}

const P = 'Options';

export const PROFILE_OPTIONS = {
  inputs: inputsOption,
  stratify: withHelp(SHUFFLE_OPTIONS.stratify, [
    'show the class balance of these columns (the classes a shuffle with',
    'the same --stratify deals); COL:bins=Q for Q quantile bins of a',
    'numeric column (then the inputs are read twice, as by shuffle)',
  ], P),
  partitions: withHelp(SHUFFLE_OPTIONS.partitions, ['warn about classes that N partitions cannot all hold'], P),
  folds: withHelp(SHUFFLE_OPTIONS.folds, ['warn about classes that K folds cannot all hold'], P),
  tolerance: withHelp(SHUFFLE_OPTIONS.tolerance, ['the tolerance those warnings check against (default 0.5, as shuffle)'], P),
  threads: withHelp(threadsOption, [
    'worker threads (default: number of cores, or none for inputs under',
    '32 MiB); 0 keeps the work on the calling thread',
  ], P),
  memory: withHelp(memoryOption, ['memory budget of the first read for COL:bins=Q (default 512MiB)'], P),
  format: withHelp(formatOption, formatOption.help!, P),
  delimiter: withHelp(delimiterOption, delimiterOption.help!, P),
  header: withHelp(headerOption, headerOption.help!, P),
  onBadRecord: {
    cli: { flag: 'on-bad-record', arg: 'MODE' },
    section: P,
    help: ['fail (default), or skip: count malformed records, list the first 20'],
    text: true,
    // Profile writes no files: there is nowhere to quarantine to.
    check: (v: unknown, c: Checker) => (v === 'fail' || v === 'skip' ? v : c.fail('"fail" or "skip" (profile writes no files, so there is nowhere to quarantine to; skipped records are counted and the first ones listed)', v)),
  },
  excludeValues: withHelp(excludeValuesOption, ['leave data values (min/max, frequent values, class names) out'], P),
  onProgress: { cli: null, ...functionValue<(e: ProfileProgress) => void>() },
} satisfies { [K in keyof Required<ProfileOptions>]: OptionDef<NonNullable<ProfileOptions[K]>> };

export const PROFILE_SPEC: CommandSpec<ProfileOptions> = {
  command: 'profile',
  table: PROFILE_OPTIONS,
  cliOnly: {
    html: {
      flag: 'html',
      arg: 'FILE',
      section: P,
      help: [
        'also write the profile as a page: class balance as bars, missing',
        'values per column, every column\'s summary, the warnings. One file,',
        'no scripts, nothing loaded from the network; readable offline',
      ],
    },
    json: { flag: 'json', section: P, help: ['print the profile as JSON on stdout'] },
    quiet: { flag: 'quiet', section: P, help: ['no progress or notes on stderr'] },
    help: { flag: 'help', short: 'h', section: P, help: ['print this help'] },
  },
};

export function resolveProfileOptions(options: ProfileOptions): ResolvedProfileOptions {
  const surface = surfaceOf(options);
  const o = readOptions(PROFILE_SPEC, options, surface) as Partial<ProfileOptions> & Pick<ProfileOptions, 'inputs'>;
  const c = (key: keyof ProfileOptions): Checker => checkerFor(surface, PROFILE_OPTIONS, key);
  return {
    inputs: o.inputs,
    stratify: o.stratify === undefined ? [] : stratifyValue.check(o.stratify, c('stratify')),
    partitions: o.partitions ?? 1,
    folds: o.folds ?? 1,
    tolerance: o.tolerance ?? DEFAULT_TOLERANCE,
    format: o.format ?? null,
    delimiter: o.delimiter,
    header: o.header ?? true,
    onBadRecord: o.onBadRecord ?? 'fail',
    excludeValues: o.excludeValues ?? false,
    // Small inputs are profiled on this thread unless threads are asked for (see inlineMaxBytes).
    threads: o.threads ?? defaultThreads(o.inputs, true),
    memory: o.memory === undefined ? DEFAULT_MEMORY : (o.memory as number),
    onProgress: o.onProgress ?? null,
    surface,
  };
}
