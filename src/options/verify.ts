/**
 * `verify()` / `rowdeck verify` and `writeReport()` / `rowdeck report`: options, tables and
 * resolvers. Threads, memory and the spill folder are the shared input options: 0 threads means
 * the calling thread here as in shuffle and profile.
 */
import { RowdeckError } from '../errors.js';
import { memoryOption, tempDirOption, threadsOption, withHelp } from './input.js';
import {
  booleanValue,
  functionValue,
  inputPathsValue,
  readOptions,
  surfaceOf,
  textValue,
  type CommandSpec,
  type OptionDef,
  type Surface,
} from './spec.js';

export interface VerifyProgress {
  stage: 'parts' | 'inputs' | 'differences' | 'replay';
  /** Files done and in all. */
  done: number;
  total: number;
  records: number;
  elapsedMs: number;
}

export interface VerifyOptions {
  /** Output folder written by shuffle (holds manifest.json). */
  dir: string;
  /** Inputs to compare with the output, in the order the run was given them ('-' reads standard input). */
  against?: string[];
  /**
   * With `against`: run the shuffle again from the manifest's seed and options over the inputs,
   * writing nothing (only hashing), and check that it gives exactly these parts. Default true.
   * Standard input or a pipe cannot be read twice: the replay is then skipped.
   */
  replay?: boolean;
  /** Folder for the replay's spill (default: beside the checked folder). */
  tempDir?: string;
  /** Memory budget of the replay, as shuffle's `memory` (the output does not depend on it). Default 512 MiB. */
  memory?: number | string;
  onProgress?: (e: VerifyProgress) => void;
  /**
   * Worker threads that read parts side by side (and run the replay). Default: the number of
   * cores for outputs of 32 MiB and more, else none; 0 reads them on the calling thread.
   */
  threads?: number;
}

/** verify()'s options checked; absent ones stay absent (their defaults depend on the output). */
export interface ResolvedVerifyOptions {
  dir: string;
  against?: string[];
  replay?: boolean;
  tempDir?: string;
  /** In bytes. */
  memory?: number;
  onProgress?: (e: VerifyProgress) => void;
  threads?: number;
  surface: Surface;
}

const V = 'Options';

const dirOption: OptionDef<string> = {
  cli: { positional: 'DIR', many: false },
  required: 'the output folder of rowdeck shuffle (it holds manifest.json)',
  ...textValue('a folder path'),
};

export const VERIFY_OPTIONS = {
  dir: dirOption,
  against: {
    cli: { flag: 'against', arg: 'INPUT...', multiple: true },
    section: V,
    help: [
      'the inputs of the run, in the same order (every argument up to the',
      'next option): the order matters, since it decides where each record',
      'goes. Records missing from or extra in the output are listed with',
      'their file:line (up to 20 of each, for inputs up to 2 million records)',
    ],
    ...inputPathsValue(),
  },
  tempDir: withHelp(tempDirOption, ['where the replay\'s spill goes (default: beside the checked folder)'], V),
  replay: {
    cli: { flag: 'no-replay', negated: true },
    section: V,
    help: ['skip the replay (standard input or a pipe is read once: skipped then)'],
    ...booleanValue(),
  },
  memory: withHelp(memoryOption, ['memory budget of the replay, as for shuffle (default 512MiB)'], V),
  threads: withHelp(threadsOption, [
    'worker threads that read parts side by side and run the replay',
    '(default: number of cores, for outputs of 32 MiB and more); 0 reads',
    'them on the calling thread',
  ], V),
  onProgress: { cli: null, ...functionValue<(e: VerifyProgress) => void>() },
} satisfies { [K in keyof Required<VerifyOptions>]: OptionDef<NonNullable<VerifyOptions[K]>> };

export const VERIFY_SPEC: CommandSpec<VerifyOptions> = {
  command: 'verify',
  table: VERIFY_OPTIONS,
  cliOnly: {
    json: { flag: 'json', section: V, help: ['print the report (every check and mismatch) on stdout'] },
    quiet: { flag: 'quiet', section: V, help: ['no progress or summary line on stderr (mismatches are still listed)'] },
    help: { flag: 'help', short: 'h', section: V, help: ['print this help'] },
  },
};

export function resolveVerifyOptions(options: VerifyOptions): ResolvedVerifyOptions {
  const surface = surfaceOf(options);
  const o = readOptions(VERIFY_SPEC, options, surface) as Omit<ResolvedVerifyOptions, 'surface'>;
  return { ...o, surface };
}

// --- report --------------------------------------------------------------------------------------

export interface ReportOptions {
  /** Re-read every part against the manifest first (as `verify()`), and show the result. Default false. */
  verify?: boolean;
  /** Worker threads for that verify (see VerifyOptions.threads). */
  threads?: number;
  onProgress?: (e: VerifyProgress) => void;
}

/** `rowdeck report DIR`: the folder is the command line's; `writeReport(dir, options)` takes it apart. */
export const REPORT_OPTIONS = {
  dir: dirOption,
  verify: {
    cli: { flag: 'verify' },
    section: V,
    help: [
      're-read every part against the manifest first (as rowdeck verify),',
      'and show which checks ran on which files and what, if anything,',
      'failed; exit 1 when a check fails (the page is written either way)',
    ],
    ...booleanValue(),
  },
  threads: withHelp(threadsOption, ['worker threads for --verify (as for rowdeck verify)'], V),
  onProgress: { cli: null, ...functionValue<(e: VerifyProgress) => void>() },
} satisfies { [K in keyof Required<ReportOptions & { dir: string }>]: OptionDef<NonNullable<(ReportOptions & { dir: string })[K]>> };

export const REPORT_SPEC: CommandSpec<ReportOptions & { dir: string }> = {
  command: 'report',
  libraryName: 'writeReport',
  table: REPORT_OPTIONS,
  cliOnly: {
    quiet: { flag: 'quiet', section: V, help: ['no progress or summary on stderr (the path still goes to stdout)'] },
    help: { flag: 'help', short: 'h', section: V, help: ['print this help'] },
  },
};

export interface ResolvedReportOptions extends ReportOptions {
  dir: string;
  surface: Surface;
}

/** writeReport(dir, options): `dir` is checked as the command line's DIR, the rest against the table. */
export function resolveReportOptions(dir: string, options: ReportOptions = {}): ResolvedReportOptions {
  const surface = surfaceOf(options);
  if (typeof options === 'object' && options !== null && Object.hasOwn(options, 'dir')) {
    throw new RowdeckError('RDK_UNKNOWN_OPTION', `Unknown option "dir" for writeReport(): the folder is its first argument, writeReport(dir, options).`, { option: 'dir' });
  }
  const o = readOptions(REPORT_SPEC, typeof options === 'object' && options !== null ? { ...options, dir } : options, surface, ['dir']) as ReportOptions & { dir: string };
  return { ...o, surface };
}
