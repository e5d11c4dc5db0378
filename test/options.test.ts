/**
 * Every option of every command, on both surfaces: the library (shuffle(), profile(), verify(),
 * writeReport()) and the command line (rowdeck shuffle|profile|verify|report). One row per case,
 * as csv-parse tests its options (one case per row, the code and the exact message asserted):
 * a good value and what the engine gets from it, then each kind of bad value with its code and
 * message. The messages name the option as the caller wrote it: --on-bad-record on the command
 * line, "onBadRecord" in the library. The last block checks that the rows cover every option of
 * every table, and that --help lists exactly the table's flags.
 *
 * The resolvers and the command-line parser are pure (no file is read), so this runs in-process;
 * test/cli.test.ts runs the built CLI for the exit statuses.
 */
import { describe, expect, it } from 'vitest';
import { parseCommandLine } from '../src/cli/args.js';
import { FINISH_HELP, PLAN_HELP, PROFILE_HELP, REPORT_HELP, SHUFFLE_HELP, STATUS_HELP, TASK_HELP, VERIFY_HELP } from '../src/cli/help.js';
import { runCli } from '../src/cli/main.js';
import { RowdeckError } from '../src/errors.js';
import {
  cliFlags,
  closest,
  editDistance,
  FINISH_SPEC,
  fromCommandLine,
  PLAN_OPTIONS,
  PLAN_SPEC,
  PROFILE_SPEC,
  REPORT_SPEC,
  resolveFinishOptions,
  resolvePlanOptions,
  resolveStatusOptions,
  resolveTaskOptions,
  resolveProfileOptions,
  resolveReportOptions,
  resolveShuffleOptions,
  resolveVerifyOptions,
  SHUFFLE_OPTIONS,
  SHUFFLE_SPEC,
  STATUS_SPEC,
  TASK_SPEC,
  VERIFY_SPEC,
  type CommandSpec,
  type FinishCommandOptions,
  type PlanOptions,
  type TaskOptions,
  type ProfileOptions,
  type ReportOptions,
  type ShuffleOptions,
  type VerifyOptions,
} from '../src/options.js';

type Command = 'shuffle' | 'profile' | 'verify' | 'report' | 'plan' | 'task' | 'finish' | 'status';
const SPECS: Record<Command, CommandSpec> = {
  shuffle: SHUFFLE_SPEC,
  profile: PROFILE_SPEC,
  verify: VERIFY_SPEC,
  report: REPORT_SPEC,
  plan: PLAN_SPEC,
  task: TASK_SPEC,
  finish: FINISH_SPEC,
  status: STATUS_SPEC,
};
const HELP: Record<Command, string> = {
  shuffle: SHUFFLE_HELP,
  profile: PROFILE_HELP,
  verify: VERIFY_HELP,
  report: REPORT_HELP,
  plan: PLAN_HELP,
  task: TASK_HELP,
  finish: FINISH_HELP,
  status: STATUS_HELP,
};
/** Options plan takes from shuffle as they are (the same definitions): their rows are shuffle's. */
const PLAN_FROM_SHUFFLE = Object.keys(PLAN_OPTIONS).filter((k) => (PLAN_OPTIONS as Record<string, unknown>)[k] === (SHUFFLE_OPTIONS as Record<string, unknown>)[k]);

/** What each command needs besides the option under test. */
const LIBRARY_BASE: Record<Command, Record<string, unknown>> = {
  shuffle: { inputs: ['in.csv'], out: 'out' },
  profile: { inputs: ['in.csv'] },
  verify: { dir: 'out' },
  report: {},
  plan: { inputs: ['in.csv'], out: 'out', work: 'work', tasks: 2 },
  task: { work: 'work', stage: 'scatter' },
  finish: { work: 'work' },
  status: { work: 'work' },
};
const CLI_BASE: Record<Command, string[]> = {
  shuffle: ['in.csv', '--out', 'out'],
  profile: ['in.csv'],
  verify: ['out'],
  report: ['out'],
  plan: ['in.csv', '--out', 'out', '--work', 'work', '--tasks', '2'],
  task: ['work', '--stage', 'scatter'],
  finish: ['work'],
  status: ['work'],
};

function resolveLibrary(cmd: Command, given: unknown): Record<string, unknown> {
  switch (cmd) {
    case 'shuffle':
      return resolveShuffleOptions(given as ShuffleOptions) as unknown as Record<string, unknown>;
    case 'profile':
      return resolveProfileOptions(given as ProfileOptions) as unknown as Record<string, unknown>;
    case 'verify':
      return resolveVerifyOptions(given as VerifyOptions) as unknown as Record<string, unknown>;
    case 'report':
      return resolveReportOptions('out', given as ReportOptions) as unknown as Record<string, unknown>;
    case 'plan':
      return resolvePlanOptions(given as PlanOptions) as unknown as Record<string, unknown>;
    case 'task':
      return resolveTaskOptions(given as TaskOptions) as unknown as Record<string, unknown>;
    case 'finish':
      return resolveFinishOptions(given as FinishCommandOptions) as unknown as Record<string, unknown>;
    case 'status':
      return resolveStatusOptions(given as { work: string }) as unknown as Record<string, unknown>;
  }
}

/** The library with the base options and `extra` (`bare`: without the base). */
function library(cmd: Command, extra: Record<string, unknown>, bare = false): Record<string, unknown> {
  return resolveLibrary(cmd, bare ? extra : { ...LIBRARY_BASE[cmd], ...extra });
}

/** The command line as main.ts runs it: parsed by the table, then the library's resolver (the options marked as the command line's). */
function commandLine(cmd: Command, argv: string[], bare = false): { resolved: Record<string, unknown>; own: Record<string, string | true> } {
  const { options, own } = parseCommandLine(SPECS[cmd], bare ? argv : [...CLI_BASE[cmd], ...argv]);
  if (cmd === 'report') {
    const { dir, ...rest } = options as { dir?: string };
    return { resolved: resolveReportOptions(dir as string, fromCommandLine(rest)) as unknown as Record<string, unknown>, own };
  }
  return { resolved: resolveLibrary(cmd, options), own };
}

function thrown(f: () => unknown): RowdeckError {
  try {
    f();
  } catch (err) {
    if (err instanceof RowdeckError) return err;
    throw err;
  }
  throw new Error('expected a RowdeckError, nothing was thrown');
}

const MiB = 1024 * 1024;
const SPLIT_RULE = 'Weights are fractions (with a decimal point) adding up to 1, or record counts (whole numbers), and one split may be * to take the rest.';
const SPLIT_EXPECTED = 'NAME=WEIGHT pairs such as train=0.8,valid=0.1,test=0.1 (fractions adding up to 1), train=8000,test=2000 (record counts), or train=0.8,test=* (* takes the rest)';
const STRATIFY_EXPECTED = 'column names, as "a,b" or ["a", "b"], each given once; COLUMN:bins=Q with Q from 2 to 1000 for quantile bins';
const PATHS_EXPECTED = 'one or more input paths (- for standard input, at most once)';
const INT = (lo: number, hi: number): string => `an integer from ${lo} to ${hi}`;
const TOLERANCE_EXPECTED = 'a number ≥ 0 (e.g. 0.1 for 10%)';
const SIZE_EXPECTED = 'a size such as 64MiB or 1GiB, at least 1MiB';
const DELIMITER_EXPECTED = 'one single-byte character other than a quote or a line end';
const HASH_NO_TOLERANCE = "(a record's part follows from its key alone, so class shares are reported, not enforced)";
const PROFILE_POLICY = '"fail" or "skip" (profile writes no files, so there is nowhere to quarantine to; skipped records are counted and the first ones listed)';

// --- the library ---------------------------------------------------------------------------------

/** [command, option, value given, what the engine gets (from the resolved options), expected, other options it needs]. */
const LIBRARY_GOOD: [Command, string, unknown, (r: Record<string, unknown>) => unknown, unknown, Record<string, unknown>?][] = [
  ['shuffle', 'inputs', ['a.csv', '-'], (r) => r.inputs, ['a.csv', '-']],
  ['shuffle', 'out', 'parts', (r) => r.out, 'parts'],
  ['shuffle', 'partitions', 100000, (r) => r.partitions, 100000],
  ['shuffle', 'split', 'train=0.8,valid=0.1,test=0.1', (r) => r.splits, [{ name: 'train', weight: 0.8 }, { name: 'valid', weight: 0.1 }, { name: 'test', weight: 0.1 }]],
  // 0.7 + 0.2 + 0.1 is 0.9999999999999999 in binary floating point: within the 1e-9 allowed.
  ['shuffle', 'split', 'a=0.7,b=0.2,c=0.1', (r) => r.splitsAreCounts, false],
  ['shuffle', 'split', 'test=5000,train=*', (r) => [r.splits, r.splitsAreCounts, r.restSplit], [[{ name: 'test', weight: 5000 }, { name: 'train', weight: 0 }], true, 1]],
  ['shuffle', 'split', 'train=0.75,test=*', (r) => (r.splits as { weight: number }[]).map((s) => s.weight), [0.75, 0.25]],
  ['shuffle', 'split', 'a=1,b=1', (r) => [r.splitsAreCounts, (r.splits as { weight: number }[]).map((s) => s.weight)], [true, [1, 1]]],
  ['shuffle', 'split', 'a=1.0,b=0.0', (r) => [r.splitsAreCounts, (r.splits as { weight: number }[]).map((s) => s.weight)], [false, [1, 0]]],
  ['shuffle', 'split', { train: 0.8, test: 0.2 }, (r) => r.splitsAreCounts, false],
  ['shuffle', 'folds', 2, (r) => [r.folds, r.foldColumn], [2, 'fold']],
  ['shuffle', 'foldColumn', 'cv', (r) => r.foldColumn, 'cv', { folds: 3 }],
  ['shuffle', 'stratify', 'fault, site', (r) => r.stratify, [{ name: 'fault', bins: 0 }, { name: 'site', bins: 0 }]],
  ['shuffle', 'stratify', ['temp,c:bins=4'], (r) => r.stratify, [{ name: 'temp,c', bins: 4 }]],
  ['shuffle', 'tolerance', 0, (r) => r.tolerance, 0],
  ['shuffle', 'group', 'sensor', (r) => [r.group, r.assign], ['sensor', 'group']],
  ['shuffle', 'assign', 'exact', (r) => r.assign, 'exact'],
  ['shuffle', 'key', 'id,site', (r) => r.key, ['id', 'site']],
  ['shuffle', 'order', 'random', (r) => r.order, 'random'],
  ['shuffle', 'seed', 'field season', (r) => [r.seed, r.seedWasDefault], ['field season', false]],
  ['shuffle', 'format', 'jsonl', (r) => r.format, 'jsonl'],
  ['shuffle', 'delimiter', ';', (r) => r.delimiter, ';'],
  ['shuffle', 'header', false, (r) => r.header, false],
  ['shuffle', 'onBadRecord', 'quarantine', (r) => r.onBadRecord, 'quarantine'],
  ['shuffle', 'force', true, (r) => r.force, true],
  ['shuffle', 'gzip', true, (r) => r.gzip, true],
  ['shuffle', 'gzipLevel', 9, (r) => [r.gzip, r.gzipLevel], [true, 9], { gzip: true }],
  ['shuffle', 'memory', '64MiB', (r) => r.memory, 64 * MiB],
  ['shuffle', 'memory', 1.5 * MiB, (r) => r.memory, 1.5 * MiB],
  ['shuffle', 'threads', 0, (r) => r.threads, 0],
  ['shuffle', 'tempDir', '/tmp/spill', (r) => r.tempDir, '/tmp/spill'],
  ['shuffle', 'stats', true, (r) => r.stats, true],
  ['shuffle', 'excludeValues', true, (r) => r.excludeValues, true],
  ['shuffle', 'report', true, (r) => r.report, true],
  ['shuffle', 'onProgress', () => {}, (r) => typeof r.onProgress, 'function'],
  ['shuffle', 'onNotice', () => {}, (r) => typeof r.onNotice, 'function'],
  ['profile', 'inputs', ['-'], (r) => r.inputs, ['-']],
  ['profile', 'stratify', 'fault', (r) => r.stratify, [{ name: 'fault', bins: 0 }]],
  ['profile', 'partitions', 8, (r) => r.partitions, 8],
  ['profile', 'folds', 5, (r) => r.folds, 5],
  ['profile', 'tolerance', 0.25, (r) => r.tolerance, 0.25],
  ['profile', 'threads', 0, (r) => r.threads, 0],
  ['profile', 'memory', '2GiB', (r) => r.memory, 2048 * MiB],
  ['profile', 'format', 'tsv', (r) => r.format, 'tsv'],
  ['profile', 'delimiter', '|', (r) => r.delimiter, '|'],
  ['profile', 'header', false, (r) => r.header, false],
  ['profile', 'onBadRecord', 'skip', (r) => r.onBadRecord, 'skip'],
  ['profile', 'excludeValues', true, (r) => r.excludeValues, true],
  ['profile', 'onProgress', () => {}, (r) => typeof r.onProgress, 'function'],
  ['verify', 'dir', 'parts', (r) => r.dir, 'parts'],
  ['verify', 'against', ['a.csv', 'b.csv'], (r) => r.against, ['a.csv', 'b.csv']],
  ['verify', 'replay', false, (r) => r.replay, false],
  ['verify', 'tempDir', 'spill', (r) => r.tempDir, 'spill'],
  ['verify', 'memory', '64MiB', (r) => r.memory, 64 * MiB],
  ['verify', 'threads', 0, (r) => r.threads, 0],
  ['verify', 'onProgress', () => {}, (r) => typeof r.onProgress, 'function'],
  ['report', 'verify', true, (r) => r.verify, true],
  ['report', 'threads', 2, (r) => r.threads, 2],
  ['report', 'onProgress', () => {}, (r) => typeof r.onProgress, 'function'],
  ['plan', 'work', '/shared/work', (r) => r.work, '/shared/work'],
  ['plan', 'tasks', 100, (r) => r.tasks, 100],
  ['plan', 'gatherTasks', 3, (r) => r.gatherTasks, 3],
  ['plan', 'threads', 0, (r) => [(r.shuffle as { threads: number }).threads, r.threadsGiven], [0, true]],
  ['plan', 'memory', '2GiB', (r) => (r.shuffle as { memory: number }).memory, 2048 * MiB],
  ['plan', 'image', 'registry.example/rowdeck:0.2', (r) => r.image, 'registry.example/rowdeck:0.2'],
  ['plan', 'claim', 'lab-data', (r) => r.claim, 'lab-data'],
  ['plan', 'mountPath', '/data', (r) => r.mountPath, '/data'],
  ['task', 'work', 'w2', (r) => r.work, 'w2'],
  ['task', 'stage', 'gather', (r) => r.stage, 'gather'],
  ['task', 'index', '3', (r) => r.index, '3'],
  ['finish', 'work', 'w2', (r) => r.work, 'w2'],
  ['finish', 'keepWork', true, (r) => r.keepWork, true],
  ['finish', 'threads', 0, (r) => r.threads, 0],
  ['status', 'work', 'w2', (r) => r.work, 'w2'],
];

const invalid = (name: string, expected: string, got: string): string => `Invalid option "${name}": expected ${expected}, got ${got}`;

/** [command, option, options given (over the base), code, message]. */
const LIBRARY_BAD: [Command, string, Record<string, unknown>, string, string][] = [
  ['shuffle', 'inputs', { inputs: [] }, 'RDK_OPTION', invalid('inputs', PATHS_EXPECTED, '[]')],
  ['shuffle', 'inputs', { inputs: 'in.csv' }, 'RDK_OPTION', invalid('inputs', PATHS_EXPECTED, '"in.csv" (a string)')],
  ['shuffle', 'inputs', { inputs: [''] }, 'RDK_OPTION', invalid('inputs', PATHS_EXPECTED, '[""]')],
  ['shuffle', 'inputs', { inputs: ['-', '-'] }, 'RDK_OPTION', invalid('inputs', PATHS_EXPECTED, '["-","-"]')],
  ['shuffle', 'inputs', { inputs: undefined }, 'RDK_MISSING_ARGUMENT', 'shuffle() needs "inputs", an input file (or - for standard input).'],
  ['shuffle', 'out', { out: undefined }, 'RDK_MISSING_ARGUMENT', 'shuffle() needs "out", the folder to write the parts and the manifest to.'],
  ['shuffle', 'out', { out: '' }, 'RDK_OPTION', invalid('out', 'an output folder path', '""')],
  ['shuffle', 'partitions', { partitions: 0 }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), '0')],
  ['shuffle', 'partitions', { partitions: 100001 }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), '100001')],
  ['shuffle', 'partitions', { partitions: 2.5 }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), '2.5')],
  ['shuffle', 'partitions', { partitions: '2' }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), '"2" (a string)')],
  ['shuffle', 'partitions', { partitions: Number.NaN }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), 'NaN')],
  // The split rule: fractions add up to 1, counts are counts, * takes the rest; the sum is shown.
  ['shuffle', 'split', { split: 'train=0.8,valid=0.1,test=0.2' }, 'RDK_OPTION', `Invalid option "split": the fractions add up to 1.1 (0.8 + 0.1 + 0.2), not 1, in "train=0.8,valid=0.1,test=0.2". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'train=0.7,test=0.2' }, 'RDK_OPTION', `Invalid option "split": the fractions add up to 0.9 (0.7 + 0.2), not 1, in "train=0.7,test=0.2". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'test=5000,train=0.5' }, 'RDK_OPTION', `Invalid option "split": test=5000 is a record count and train=0.5 a fraction, and the two do not mix (give the other as * to take the rest), in "test=5000,train=0.5". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'a=*,b=*' }, 'RDK_OPTION', `Invalid option "split": a and b are both *, and only one split may take the rest, in "a=*,b=*". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'a=0.5,b=0.5,c=*' }, 'RDK_OPTION', `Invalid option "split": the fractions add up to 1 (0.5 + 0.5), which leaves nothing for c=*, in "a=0.5,b=0.5,c=*". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'a=1.5,b=*' }, 'RDK_OPTION', `Invalid option "split": a=1.5 is a fraction above 1 (a record count is a whole number), in "a=1.5,b=*". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'a=1' }, 'RDK_OPTION', `Invalid option "split": one split only: give at least two, in "a=1". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'a=x,b=1' }, 'RDK_OPTION', `Invalid option "split": the weight of "a" is "x", not a fraction, a count or *, in "a=x,b=1". ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: { a: -1, b: '*' } }, 'RDK_OPTION', `Invalid option "split": the weight of "a" is -1, not a fraction, a count or "*", in {"a":-1,"b":"*"}. ${SPLIT_RULE}`],
  ['shuffle', 'split', { split: 'train' }, 'RDK_OPTION', invalid('split', SPLIT_EXPECTED, '"train"')],
  ['shuffle', 'split', { split: 5 }, 'RDK_OPTION', invalid('split', SPLIT_EXPECTED, '5')],
  ['shuffle', 'split', { split: 'Manifest=0.5,b=0.5' }, 'RDK_OPTION', invalid('split', 'split names other than those of the files rowdeck writes itself (manifest, rejected, report, in any case)', '"Manifest"')],
  ['shuffle', 'split', { split: '../x=0.5,b=0.5' }, 'RDK_OPTION', invalid('split', 'split names of letters, digits, "_", "-" or "." (a name, not a path), starting with a letter or digit', '"../x"')],
  ['shuffle', 'split', { split: 'a=0.5,a=0.5' }, 'RDK_OPTION', invalid('split', 'distinct split names', '"a"')],
  ['shuffle', 'split', { split: 'a=100,b=*', assign: 'hash', key: 'id' }, 'RDK_OPTION', invalid('split', 'fractions with assign: "hash" (its shares are approximate, so record counts cannot be met)', '"a=100,b=*"')],
  ['shuffle', 'folds', { folds: 1 }, 'RDK_OPTION', invalid('folds', INT(2, 1000), '1')],
  ['shuffle', 'folds', { folds: 1001 }, 'RDK_OPTION', invalid('folds', INT(2, 1000), '1001')],
  ['shuffle', 'foldColumn', { foldColumn: '', folds: 3 }, 'RDK_OPTION', invalid('foldColumn', 'a column name', '""')],
  ['shuffle', 'foldColumn', { foldColumn: 'cv' }, 'RDK_OPTION', invalid('foldColumn', 'a name only together with "folds" (it names the column the folds add)', '"cv"')],
  ['shuffle', 'stratify', { stratify: 'c,c' }, 'RDK_OPTION', invalid('stratify', 'each column once ("c" is given twice)', '"c,c"')],
  ['shuffle', 'stratify', { stratify: 'a,,b' }, 'RDK_OPTION', invalid('stratify', STRATIFY_EXPECTED, '"a,,b"')],
  ['shuffle', 'stratify', { stratify: ['a', 5] }, 'RDK_OPTION', invalid('stratify', STRATIFY_EXPECTED, '["a",5]')],
  ['shuffle', 'stratify', { stratify: 'x:bins=1' }, 'RDK_OPTION', invalid('stratify', 'COLUMN:bins=Q with Q an integer from 2 to 1000', '"x:bins=1"')],
  ['shuffle', 'stratify', { stratify: 5 }, 'RDK_OPTION', invalid('stratify', STRATIFY_EXPECTED, '5')],
  ['shuffle', 'tolerance', { tolerance: -0.1 }, 'RDK_OPTION', invalid('tolerance', TOLERANCE_EXPECTED, '-0.1')],
  ['shuffle', 'tolerance', { tolerance: Infinity }, 'RDK_OPTION', invalid('tolerance', TOLERANCE_EXPECTED, 'Infinity')],
  ['shuffle', 'tolerance', { tolerance: '0.1' }, 'RDK_OPTION', invalid('tolerance', TOLERANCE_EXPECTED, '"0.1" (a string)')],
  ['shuffle', 'tolerance', { tolerance: 2, assign: 'hash', key: 'id' }, 'RDK_OPTION', invalid('tolerance', `no tolerance with assign: "hash" ${HASH_NO_TOLERANCE}`, '2')],
  ['shuffle', 'group', { group: '' }, 'RDK_OPTION', invalid('group', 'a column name', '""')],
  ['shuffle', 'group', { group: ['sensor'] }, 'RDK_OPTION', invalid('group', 'a column name', '["sensor"]')],
  ['shuffle', 'assign', { assign: 'random' }, 'RDK_OPTION', invalid('assign', '"exact" or "hash"', '"random"')],
  ['shuffle', 'assign', { assign: 'hash' }, 'RDK_OPTION', 'Invalid option "assign": assign: "hash" needs "key", the columns a record\'s part follows from'],
  ['shuffle', 'assign', { assign: 'hash', key: 'id', group: 'g' }, 'RDK_OPTION', invalid('assign', '"exact" with "group" (groups are dealt as units, not by key hash)', '"hash"')],
  ['shuffle', 'key', { key: 'a,a' }, 'RDK_OPTION', invalid('key', 'column names, as "a,b" or ["a", "b"], each given once ("a" is given twice)', '"a,a"')],
  ['shuffle', 'key', { key: '' }, 'RDK_OPTION', invalid('key', 'column names, as "a,b" or ["a", "b"], each given once', '""')],
  ['shuffle', 'order', { order: 'sorted' }, 'RDK_OPTION', invalid('order', '"random", "spread" or "grouped"', '"sorted"')],
  ['shuffle', 'order', { order: 'grouped' }, 'RDK_OPTION', invalid('order', '"random" or "spread" without "group" or assign: "hash" ("grouped" keeps the records of one group or key together: give "group", or assign: "hash" with "key")', '"grouped"')],
  ['shuffle', 'order', { order: 'spread' }, 'RDK_OPTION', invalid('order', '"random" or "grouped" without "stratify" ("spread" spreads every class evenly through each part: give "stratify")', '"spread"')],
  ['shuffle', 'seed', { seed: '' }, 'RDK_OPTION', invalid('seed', 'non-empty text', '""')],
  ['shuffle', 'seed', { seed: 2025 }, 'RDK_OPTION', invalid('seed', 'non-empty text', '2025')],
  ['shuffle', 'format', { format: 'xml' }, 'RDK_OPTION', invalid('format', '"csv", "tsv" or "jsonl"', '"xml"')],
  ['shuffle', 'delimiter', { delimiter: ';;' }, 'RDK_OPTION', invalid('delimiter', DELIMITER_EXPECTED, '";;"')],
  ['shuffle', 'delimiter', { delimiter: 'é' }, 'RDK_OPTION', invalid('delimiter', DELIMITER_EXPECTED, '"é"')],
  ['shuffle', 'delimiter', { delimiter: '"' }, 'RDK_OPTION', invalid('delimiter', DELIMITER_EXPECTED, '"\\""')],
  ['shuffle', 'delimiter', { delimiter: '\n' }, 'RDK_OPTION', invalid('delimiter', DELIMITER_EXPECTED, '"\\n"')],
  ['shuffle', 'header', { header: 'no' }, 'RDK_OPTION', invalid('header', 'true or false', '"no" (a string)')],
  ['shuffle', 'onBadRecord', { onBadRecord: 'ignore' }, 'RDK_OPTION', invalid('onBadRecord', '"fail", "skip" or "quarantine"', '"ignore"')],
  ['shuffle', 'force', { force: 1 }, 'RDK_OPTION', invalid('force', 'true or false', '1')],
  ['shuffle', 'gzip', { gzip: 'true' }, 'RDK_OPTION', invalid('gzip', 'true or false', '"true" (a string)')],
  ['shuffle', 'gzipLevel', { gzip: true, gzipLevel: 10 }, 'RDK_OPTION', invalid('gzipLevel', INT(1, 9), '10')],
  ['shuffle', 'gzipLevel', { gzip: true, gzipLevel: 2.5 }, 'RDK_OPTION', invalid('gzipLevel', INT(1, 9), '2.5')],
  ['shuffle', 'gzipLevel', { gzipLevel: 6 }, 'RDK_OPTION', invalid('gzipLevel', 'it together with "gzip" (the level is that of gzip-compressed parts)', '6')],
  ['shuffle', 'memory', { memory: 'lots' }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '"lots"')],
  ['shuffle', 'memory', { memory: '0.5MiB' }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '"0.5MiB"')],
  ['shuffle', 'memory', { memory: -1 }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '-1')],
  ['shuffle', 'threads', { threads: 257 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '257')],
  ['shuffle', 'threads', { threads: -1 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '-1')],
  ['shuffle', 'threads', { threads: 'x' }, 'RDK_OPTION', invalid('threads', INT(0, 256), '"x" (a string)')],
  ['shuffle', 'tempDir', { tempDir: '' }, 'RDK_OPTION', invalid('tempDir', 'a folder path', '""')],
  ['shuffle', 'stats', { stats: 'yes' }, 'RDK_OPTION', invalid('stats', 'true or false', '"yes" (a string)')],
  ['shuffle', 'excludeValues', { excludeValues: 1 }, 'RDK_OPTION', invalid('excludeValues', 'true or false', '1')],
  ['shuffle', 'report', { report: null }, 'RDK_OPTION', invalid('report', 'true or false', 'null')],
  ['shuffle', 'onProgress', { onProgress: 'x' }, 'RDK_OPTION', invalid('onProgress', 'a function', '"x" (a string)')],
  ['shuffle', 'onNotice', { onNotice: 5 }, 'RDK_OPTION', invalid('onNotice', 'a function', '5')],
  ['shuffle', '(unknown)', { partitons: 3 }, 'RDK_UNKNOWN_OPTION', 'Unknown option "partitons" for shuffle(). Did you mean "partitions"?'],
  ['shuffle', '(unknown)', { on_bad_record: 'skip' }, 'RDK_UNKNOWN_OPTION', 'Unknown option "on_bad_record" for shuffle(). Did you mean "onBadRecord"?'],
  ['shuffle', '(unknown)', { colour: 'blue' }, 'RDK_UNKNOWN_OPTION', 'Unknown option "colour" for shuffle(). It takes: inputs, partitions, split, folds, foldColumn, stratify, tolerance, group, assign, key, order, seed, format, delimiter, header, onBadRecord, out, force, gzip, gzipLevel, memory, threads, tempDir, stats, excludeValues, report, onProgress, onNotice.'],
  ['profile', 'inputs', { inputs: undefined }, 'RDK_MISSING_ARGUMENT', 'profile() needs "inputs", an input file (or - for standard input).'],
  ['profile', 'inputs', { inputs: [7] }, 'RDK_OPTION', invalid('inputs', PATHS_EXPECTED, '[7]')],
  ['profile', 'stratify', { stratify: 'c,c' }, 'RDK_OPTION', invalid('stratify', 'each column once ("c" is given twice)', '"c,c"')],
  ['profile', 'partitions', { partitions: '2' }, 'RDK_OPTION', invalid('partitions', INT(1, 100000), '"2" (a string)')],
  ['profile', 'folds', { folds: 1 }, 'RDK_OPTION', invalid('folds', INT(2, 1000), '1')],
  ['profile', 'tolerance', { tolerance: -1 }, 'RDK_OPTION', invalid('tolerance', TOLERANCE_EXPECTED, '-1')],
  ['profile', 'threads', { threads: 1.5 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '1.5')],
  ['profile', 'memory', { memory: '1KiB' }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '"1KiB"')],
  ['profile', 'format', { format: 'CSV' }, 'RDK_OPTION', invalid('format', '"csv", "tsv" or "jsonl"', '"CSV"')],
  ['profile', 'delimiter', { delimiter: '' }, 'RDK_OPTION', invalid('delimiter', DELIMITER_EXPECTED, '""')],
  ['profile', 'header', { header: 0 }, 'RDK_OPTION', invalid('header', 'true or false', '0')],
  ['profile', 'onBadRecord', { onBadRecord: 'quarantine' }, 'RDK_OPTION', invalid('onBadRecord', PROFILE_POLICY, '"quarantine"')],
  ['profile', 'excludeValues', { excludeValues: 'yes' }, 'RDK_OPTION', invalid('excludeValues', 'true or false', '"yes" (a string)')],
  ['profile', 'onProgress', { onProgress: {} }, 'RDK_OPTION', invalid('onProgress', 'a function', '{}')],
  ['profile', '(unknown)', { partitons: 3 }, 'RDK_UNKNOWN_OPTION', 'Unknown option "partitons" for profile(). Did you mean "partitions"?'],
  ['profile', '(unknown)', { out: 'x' }, 'RDK_UNKNOWN_OPTION', 'Unknown option "out" for profile(). It takes: inputs, stratify, partitions, folds, tolerance, threads, memory, format, delimiter, header, onBadRecord, excludeValues, onProgress.'],
  ['verify', 'dir', { dir: undefined }, 'RDK_MISSING_ARGUMENT', 'verify() needs "dir", the output folder of rowdeck shuffle (it holds manifest.json).'],
  ['verify', 'dir', { dir: '' }, 'RDK_OPTION', invalid('dir', 'a folder path', '""')],
  ['verify', 'against', { against: [] }, 'RDK_OPTION', invalid('against', PATHS_EXPECTED, '[]')],
  ['verify', 'against', { against: 'in.csv' }, 'RDK_OPTION', invalid('against', PATHS_EXPECTED, '"in.csv" (a string)')],
  ['verify', 'replay', { replay: 'no' }, 'RDK_OPTION', invalid('replay', 'true or false', '"no" (a string)')],
  ['verify', 'tempDir', { tempDir: 3 }, 'RDK_OPTION', invalid('tempDir', 'a folder path', '3')],
  ['verify', 'memory', { memory: 'lots' }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '"lots"')],
  ['verify', 'threads', { threads: 'x' }, 'RDK_OPTION', invalid('threads', INT(0, 256), '"x" (a string)')],
  ['verify', 'onProgress', { onProgress: true }, 'RDK_OPTION', invalid('onProgress', 'a function', 'true')],
  ['verify', '(unknown)', { aginst: ['a.csv'] }, 'RDK_UNKNOWN_OPTION', 'Unknown option "aginst" for verify(). Did you mean "against"?'],
  ['report', 'verify', { verify: 'yes' }, 'RDK_OPTION', invalid('verify', 'true or false', '"yes" (a string)')],
  ['report', 'threads', { threads: -1 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '-1')],
  ['report', 'onProgress', { onProgress: 'x' }, 'RDK_OPTION', invalid('onProgress', 'a function', '"x" (a string)')],
  ['report', '(unknown)', { verfy: true }, 'RDK_UNKNOWN_OPTION', 'Unknown option "verfy" for writeReport(). Did you mean "verify"?'],
  ['report', '(unknown)', { colour: 'blue' }, 'RDK_UNKNOWN_OPTION', 'Unknown option "colour" for writeReport(). It takes: verify, threads, onProgress.'],
  ['report', '(unknown)', { dir: 'out' }, 'RDK_UNKNOWN_OPTION', 'Unknown option "dir" for writeReport(): the folder is its first argument, writeReport(dir, options).'],
  ['plan', 'work', { work: undefined }, 'RDK_MISSING_ARGUMENT', `planCluster() needs "work", a new folder on a file system every node sees, for the tasks' files.`],
  ['plan', 'work', { work: '' }, 'RDK_OPTION', invalid('work', 'a folder path', '""')],
  ['plan', 'tasks', { tasks: undefined }, 'RDK_MISSING_ARGUMENT', 'planCluster() needs "tasks", the number of scatter tasks to cut the inputs into.'],
  ['plan', 'tasks', { tasks: 0 }, 'RDK_OPTION', invalid('tasks', INT(1, 100000), '0')],
  ['plan', 'gatherTasks', { gatherTasks: 1.5 }, 'RDK_OPTION', invalid('gatherTasks', INT(1, 100000), '1.5')],
  ['plan', 'threads', { threads: 300 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '300')],
  ['plan', 'memory', { memory: 'lots' }, 'RDK_OPTION', invalid('memory', SIZE_EXPECTED, '"lots"')],
  ['plan', 'image', { image: '' }, 'RDK_OPTION', invalid('image', 'an image name', '""')],
  ['plan', 'claim', { claim: 7 }, 'RDK_OPTION', invalid('claim', 'a claim name', '7')],
  ['plan', 'mountPath', { mountPath: 'data' }, 'RDK_OPTION', invalid('mountPath', 'an absolute path', '"data"')],
  ['plan', '(unknown)', { tempDir: '/tmp' }, 'RDK_OPTION', 'Invalid option "tempDir": a plan keeps its spill in the work folder ("work"), where every task can read it; leave "tempDir" out.'],
  ['plan', '(unknown)', { gatherTask: 2 }, 'RDK_UNKNOWN_OPTION', 'Unknown option "gatherTask" for planCluster(). Did you mean "gatherTasks"?'],
  ['task', 'work', { work: undefined }, 'RDK_MISSING_ARGUMENT', 'task() needs "work", the work folder of a plan (rowdeck plan --work).'],
  ['task', 'stage', { stage: 'finish' }, 'RDK_OPTION', invalid('stage', '"scatter", "deal" or "gather"', '"finish"')],
  ['task', 'index', { index: 3 }, 'RDK_OPTION', invalid('index', 'a task number', '3')],
  ['finish', 'work', { work: '' }, 'RDK_OPTION', invalid('work', 'a folder path', '""')],
  ['finish', 'keepWork', { keepWork: 'yes' }, 'RDK_OPTION', invalid('keepWork', 'true or false', '"yes" (a string)')],
  ['finish', 'threads', { threads: 257 }, 'RDK_OPTION', invalid('threads', INT(0, 256), '257')],
  ['status', 'work', { work: 5 }, 'RDK_OPTION', invalid('work', 'a folder path', '5')],
];

describe('the library: a good value of every option, and what the engine gets', () => {
  it.each(LIBRARY_GOOD.map((r) => [r[0], r[1], JSON.stringify(r[2]) ?? 'a function', r] as const))('%s %s: %s', (_c, _k, _s, [cmd, key, value, pick, want, needs]) => {
    expect(pick(library(cmd, { ...needs, [key]: value }))).toEqual(want);
  });
});

describe('the library: each kind of bad value, its code and its message', () => {
  it.each(LIBRARY_BAD.map((r) => [r[0], r[1], r[4], r] as const))('%s %s: %s', (_c, _k, _m, [cmd, , extra, code, message]) => {
    const e = cmd === 'report' && Object.hasOwn(extra, 'dir') ? thrown(() => resolveReportOptions('out', extra as ReportOptions)) : thrown(() => library(cmd, extra));
    expect(e.code).toBe(code);
    expect(e.message).toBe(message);
    expect(e.isUsage).toBe(true);
  });

  it('options that are not an object', () => {
    expect(thrown(() => resolveShuffleOptions(null as unknown as ShuffleOptions)).message).toBe('Invalid options of shuffle(): expected an object, got null');
    expect(thrown(() => resolveVerifyOptions('out' as unknown as VerifyOptions)).message).toBe('Invalid options of verify(): expected an object, got "out" (a string)');
    expect(thrown(() => resolveReportOptions(undefined as unknown as string)).message).toBe('writeReport() needs "dir", the output folder of rowdeck shuffle (it holds manifest.json).');
  });

  it('a rejected option carries its library name in details, whatever the surface', () => {
    expect(thrown(() => library('shuffle', { onBadRecord: 'x' })).details.option).toBe('onBadRecord');
    expect(thrown(() => commandLine('shuffle', ['--on-bad-record', 'x'])).details.option).toBe('onBadRecord');
  });
});

// --- the command line ----------------------------------------------------------------------------

/** [command, option, argv (after the base), what the engine gets, expected]. */
const CLI_GOOD: [Command, string, string[], (r: Record<string, unknown>) => unknown, unknown][] = [
  ['shuffle', 'inputs', ['more.csv'], (r) => r.inputs, ['in.csv', 'more.csv']],
  ['shuffle', 'out', ['--force'], (r) => r.out, 'out'],
  ['shuffle', 'partitions', ['--partitions', '8'], (r) => r.partitions, 8],
  ['shuffle', 'partitions', ['--partitions=8'], (r) => r.partitions, 8],
  // Given again, the last value counts (a script may append an override).
  ['shuffle', 'partitions', ['--partitions', '2', '--partitions', '3'], (r) => r.partitions, 3],
  ['shuffle', 'out', ['--out', 'b'], (r) => r.out, 'b'],
  ['shuffle', 'split', ['--split', 'train=0.8,test=*'], (r) => (r.splits as { weight: number }[]).map((s) => s.weight), [0.8, 0.19999999999999996]],
  ['shuffle', 'folds', ['--folds', '5'], (r) => r.folds, 5],
  ['shuffle', 'foldColumn', ['--folds', '5', '--fold-column', 'cv'], (r) => r.foldColumn, 'cv'],
  ['shuffle', 'stratify', ['--stratify', 'fault,temp:bins=4'], (r) => r.stratify, [{ name: 'fault', bins: 0 }, { name: 'temp', bins: 4 }]],
  ['shuffle', 'tolerance', ['--tolerance', '0.05'], (r) => r.tolerance, 0.05],
  ['shuffle', 'group', ['--group', 'sensor'], (r) => r.assign, 'group'],
  ['shuffle', 'assign', ['--assign', 'hash', '--key', 'id'], (r) => r.assign, 'hash'],
  ['shuffle', 'key', ['--key', 'id,site'], (r) => r.key, ['id', 'site']],
  ['shuffle', 'order', ['--order', 'spread', '--stratify', 'fault'], (r) => r.order, 'spread'],
  ['shuffle', 'seed', ['--seed=-starts-with-dash'], (r) => r.seed, '-starts-with-dash'],
  ['shuffle', 'format', ['--format', 'tsv'], (r) => r.format, 'tsv'],
  ['shuffle', 'delimiter', ['--delimiter', '\\t'], (r) => r.delimiter, '\t'],
  ['shuffle', 'delimiter', ['--delimiter', 'tab'], (r) => r.delimiter, '\t'],
  ['shuffle', 'header', ['--no-header'], (r) => r.header, false],
  ['shuffle', 'onBadRecord', ['--on-bad-record', 'skip'], (r) => r.onBadRecord, 'skip'],
  ['shuffle', 'force', ['--force'], (r) => r.force, true],
  ['shuffle', 'gzip', ['--gzip'], (r) => r.gzip, true],
  ['shuffle', 'gzipLevel', ['--gzip', '--gzip-level', '1'], (r) => r.gzipLevel, 1],
  ['shuffle', 'memory', ['--memory', '1GiB'], (r) => r.memory, 1024 * MiB],
  ['shuffle', 'threads', ['--threads', '0'], (r) => r.threads, 0],
  ['shuffle', 'tempDir', ['--temp-dir', 'spill'], (r) => r.tempDir, 'spill'],
  ['shuffle', 'stats', ['--stats'], (r) => r.stats, true],
  ['shuffle', 'excludeValues', ['--exclude-values'], (r) => r.excludeValues, true],
  ['shuffle', 'report', ['--report'], (r) => r.report, true],
  ['profile', 'inputs', ['-'], (r) => r.inputs, ['in.csv', '-']],
  ['profile', 'stratify', ['--stratify', 'fault'], (r) => r.stratify, [{ name: 'fault', bins: 0 }]],
  ['profile', 'partitions', ['--partitions', '8'], (r) => r.partitions, 8],
  ['profile', 'folds', ['--folds', '5'], (r) => r.folds, 5],
  ['profile', 'tolerance', ['--tolerance', '1e-1'], (r) => r.tolerance, 0.1],
  ['profile', 'threads', ['--threads', '0'], (r) => r.threads, 0],
  ['profile', 'memory', ['--memory', '64MiB'], (r) => r.memory, 64 * MiB],
  ['profile', 'format', ['--format', 'jsonl'], (r) => r.format, 'jsonl'],
  ['profile', 'delimiter', ['--delimiter', ';'], (r) => r.delimiter, ';'],
  ['profile', 'header', ['--no-header'], (r) => r.header, false],
  ['profile', 'onBadRecord', ['--on-bad-record', 'skip'], (r) => r.onBadRecord, 'skip'],
  ['profile', 'excludeValues', ['--exclude-values'], (r) => r.excludeValues, true],
  ['verify', 'dir', [], (r) => r.dir, 'out'],
  ['verify', 'against', ['--against', 'a.csv', '-', '--threads', '2'], (r) => [r.against, r.threads], [['a.csv', '-'], 2]],
  ['verify', 'against', ['--against=a.csv', '--against', 'b.csv'], (r) => r.against, ['a.csv', 'b.csv']],
  ['verify', 'replay', ['--no-replay'], (r) => r.replay, false],
  ['verify', 'tempDir', ['--temp-dir', 'spill'], (r) => r.tempDir, 'spill'],
  ['verify', 'memory', ['--memory', '128MiB'], (r) => r.memory, 128 * MiB],
  ['verify', 'threads', ['--threads', '0'], (r) => r.threads, 0],
  ['report', 'dir', [], (r) => r.dir, 'out'],
  ['report', 'verify', ['--verify'], (r) => r.verify, true],
  ['report', 'threads', ['--threads', '3'], (r) => r.threads, 3],
  ['plan', 'work', [], (r) => r.work, 'work'],
  ['plan', 'tasks', ['--tasks', '8'], (r) => r.tasks, 8],
  ['plan', 'gatherTasks', ['--gather-tasks', '4'], (r) => r.gatherTasks, 4],
  ['plan', 'threads', ['--threads', '2'], (r) => (r.shuffle as { threads: number }).threads, 2],
  ['plan', 'memory', [], (r) => (r.shuffle as { memory: number; memoryIsDefault: boolean }).memory, 512 * MiB],
  ['plan', 'memory', ['--memory', '1GiB'], (r) => (r.shuffle as { memory: number }).memory, 1024 * MiB],
  ['plan', 'image', ['--image', 'node:20'], (r) => r.image, 'node:20'],
  ['plan', 'claim', ['--claim', 'shared'], (r) => r.claim, 'shared'],
  ['plan', 'mountPath', ['--mount-path', '/mnt'], (r) => r.mountPath, '/mnt'],
  ['task', 'work', [], (r) => r.work, 'work'],
  ['task', 'stage', ['--stage', 'deal'], (r) => r.stage, 'deal'],
  ['task', 'index', ['--index', '7'], (r) => r.index, '7'],
  ['finish', 'work', [], (r) => r.work, 'work'],
  ['finish', 'keepWork', ['--keep-work'], (r) => r.keepWork, true],
  ['finish', 'threads', ['--threads', '3'], (r) => r.threads, 3],
  ['status', 'work', [], (r) => r.work, 'work'],
];

const cliInvalid = (flag: string, expected: string, got: string): string => `Invalid option --${flag}: expected ${expected}, got ${got}`;

/** [command, option, argv (after the base unless bare), code, message, bare]. */
const CLI_BAD: [Command, string, string[], string, string, boolean?][] = [
  ['shuffle', 'inputs', ['--out', 'out'], 'RDK_MISSING_ARGUMENT', 'rowdeck shuffle needs at least one INPUT, an input file (or - for standard input).', true],
  ['shuffle', 'inputs', ['-', '-', '--out', 'out'], 'RDK_OPTION', `Invalid argument INPUT: expected ${PATHS_EXPECTED}, got "-" "-"`, true],
  ['shuffle', 'out', ['in.csv'], 'RDK_MISSING_ARGUMENT', 'rowdeck shuffle needs --out DIR, the folder to write the parts and the manifest to.', true],
  ['shuffle', 'out', ['in.csv', '--out='], 'RDK_OPTION', cliInvalid('out', 'an output folder path', '""'), true],
  ['shuffle', 'partitions', ['--partitions', '0'], 'RDK_OPTION', cliInvalid('partitions', INT(1, 100000), '0')],
  ['shuffle', 'partitions', ['--partitions', 'x'], 'RDK_OPTION', cliInvalid('partitions', INT(1, 100000), '"x"')],
  ['shuffle', 'partitions', ['--partitions', '2.5'], 'RDK_OPTION', cliInvalid('partitions', INT(1, 100000), '"2.5"')],
  ['shuffle', 'partitions', ['--partitions'], 'RDK_OPTION', 'Invalid option --partitions: expected N after it, got nothing'],
  ['shuffle', 'split', ['--split', 'train=0.8,valid=0.1,test=0.2'], 'RDK_OPTION', `Invalid option --split: the fractions add up to 1.1 (0.8 + 0.1 + 0.2), not 1, in "train=0.8,valid=0.1,test=0.2". ${SPLIT_RULE}`],
  ['shuffle', 'split', ['--split', 'train=3,test=1.0'], 'RDK_OPTION', `Invalid option --split: train=3 is a record count and test=1.0 a fraction, and the two do not mix (give the other as * to take the rest), in "train=3,test=1.0". ${SPLIT_RULE}`],
  ['shuffle', 'split', ['--split', 'a=100,b=*', '--assign', 'hash', '--key', 'id'], 'RDK_OPTION', cliInvalid('split', 'fractions with --assign hash (its shares are approximate, so record counts cannot be met)', '"a=100,b=*"')],
  ['shuffle', 'folds', ['--folds', '1'], 'RDK_OPTION', cliInvalid('folds', INT(2, 1000), '1')],
  ['shuffle', 'foldColumn', ['--fold-column', 'cv'], 'RDK_OPTION', cliInvalid('fold-column', 'a name only together with --folds (it names the column the folds add)', '"cv"')],
  ['shuffle', 'stratify', ['--stratify', 'c,c'], 'RDK_OPTION', cliInvalid('stratify', 'each column once ("c" is given twice)', '"c,c"')],
  ['shuffle', 'tolerance', ['--tolerance', '-1'], 'RDK_OPTION', cliInvalid('tolerance', TOLERANCE_EXPECTED, '-1')],
  ['shuffle', 'tolerance', ['--tolerance=-1'], 'RDK_OPTION', cliInvalid('tolerance', TOLERANCE_EXPECTED, '-1')],
  ['shuffle', 'tolerance', ['--tolerance', 'NaN'], 'RDK_OPTION', cliInvalid('tolerance', TOLERANCE_EXPECTED, '"NaN"')],
  ['shuffle', 'tolerance', ['--tolerance', '0.2', '--assign', 'hash', '--key', 'id'], 'RDK_OPTION', cliInvalid('tolerance', `no tolerance with --assign hash ${HASH_NO_TOLERANCE}`, '0.2')],
  ['shuffle', 'group', ['--group='], 'RDK_OPTION', cliInvalid('group', 'a column name', '""')],
  ['shuffle', 'assign', ['--assign', 'random'], 'RDK_OPTION', cliInvalid('assign', '"exact" or "hash"', '"random"')],
  ['shuffle', 'assign', ['--assign', 'hash'], 'RDK_OPTION', "Invalid option --assign: --assign hash needs --key, the columns a record's part follows from"],
  ['shuffle', 'key', ['--key', 'a,,b'], 'RDK_OPTION', cliInvalid('key', 'column names, as "a,b" or ["a", "b"], each given once', '"a,,b"')],
  ['shuffle', 'order', ['--order', 'grouped'], 'RDK_OPTION', cliInvalid('order', '"random" or "spread" without --group or --assign hash ("grouped" keeps the records of one group or key together: give --group, or --assign hash with --key)', '"grouped"')],
  ['shuffle', 'seed', ['--seed='], 'RDK_OPTION', cliInvalid('seed', 'non-empty text', '""')],
  ['shuffle', 'seed', ['--seed', '--gzip'], 'RDK_OPTION', 'Invalid option --seed: expected TEXT after it, got "--gzip" (a value that starts with - is given as --seed=--gzip)'],
  ['shuffle', 'format', ['--format', 'xml'], 'RDK_OPTION', cliInvalid('format', '"csv", "tsv" or "jsonl"', '"xml"')],
  ['shuffle', 'delimiter', ['--delimiter', ';;'], 'RDK_OPTION', cliInvalid('delimiter', DELIMITER_EXPECTED, '";;"')],
  ['shuffle', 'header', ['--no-header=yes'], 'RDK_OPTION', 'Invalid option --no-header: it takes no value (it is a switch), got "yes"'],
  ['shuffle', 'header', ['--header'], 'RDK_UNKNOWN_OPTION', 'Unknown option --header for rowdeck shuffle. See rowdeck shuffle --help.'],
  ['shuffle', 'onBadRecord', ['--on-bad-record', 'x'], 'RDK_OPTION', cliInvalid('on-bad-record', '"fail", "skip" or "quarantine"', '"x"')],
  ['shuffle', 'force', ['--force=true'], 'RDK_OPTION', 'Invalid option --force: it takes no value (it is a switch), got "true"'],
  ['shuffle', 'gzip', ['--gzip=yes'], 'RDK_OPTION', 'Invalid option --gzip: it takes no value (it is a switch), got "yes"'],
  ['shuffle', 'gzipLevel', ['--gzip', '--gzip-level', '0'], 'RDK_OPTION', cliInvalid('gzip-level', INT(1, 9), '0')],
  ['shuffle', 'gzipLevel', ['--gzip-level', '3'], 'RDK_OPTION', cliInvalid('gzip-level', 'it together with --gzip (the level is that of gzip-compressed parts)', '3')],
  ['shuffle', 'memory', ['--memory', 'lots'], 'RDK_OPTION', cliInvalid('memory', SIZE_EXPECTED, '"lots"')],
  ['shuffle', 'threads', ['--threads', 'x'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '"x"')],
  ['shuffle', 'threads', ['--threads', '-1'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '-1')],
  ['shuffle', 'tempDir', ['--temp-dir='], 'RDK_OPTION', cliInvalid('temp-dir', 'a folder path', '""')],
  ['shuffle', 'stats', ['--stats=1'], 'RDK_OPTION', 'Invalid option --stats: it takes no value (it is a switch), got "1"'],
  ['shuffle', 'excludeValues', ['--exclude-values=no'], 'RDK_OPTION', 'Invalid option --exclude-values: it takes no value (it is a switch), got "no"'],
  ['shuffle', 'report', ['--report=x'], 'RDK_OPTION', 'Invalid option --report: it takes no value (it is a switch), got "x"'],
  // Undocumented short flags are gone; the unknown ones get a suggestion where one is close.
  ['shuffle', '(unknown)', ['-p', '3'], 'RDK_UNKNOWN_OPTION', 'Unknown option -p for rowdeck shuffle. See rowdeck shuffle --help.'],
  ['shuffle', '(unknown)', ['-o', 'x'], 'RDK_UNKNOWN_OPTION', 'Unknown option -o for rowdeck shuffle. See rowdeck shuffle --help.'],
  ['shuffle', '(unknown)', ['-q'], 'RDK_UNKNOWN_OPTION', 'Unknown option -q for rowdeck shuffle. See rowdeck shuffle --help.'],
  ['shuffle', '(unknown)', ['--partitons', '3'], 'RDK_UNKNOWN_OPTION', 'Unknown option --partitons for rowdeck shuffle. Did you mean --partitions? See rowdeck shuffle --help.'],
  ['shuffle', '(unknown)', ['--onBadRecord', 'skip'], 'RDK_UNKNOWN_OPTION', 'Unknown option --onBadRecord for rowdeck shuffle. Did you mean --on-bad-record? See rowdeck shuffle --help.'],
  ['profile', 'inputs', [], 'RDK_MISSING_ARGUMENT', 'rowdeck profile needs at least one INPUT, an input file (or - for standard input).', true],
  ['profile', 'stratify', ['--stratify', 'x:bins=0'], 'RDK_OPTION', cliInvalid('stratify', 'COLUMN:bins=Q with Q an integer from 2 to 1000', '"x:bins=0"')],
  ['profile', 'partitions', ['--partitions', 'x'], 'RDK_OPTION', cliInvalid('partitions', INT(1, 100000), '"x"')],
  ['profile', 'folds', ['--folds', '1001'], 'RDK_OPTION', cliInvalid('folds', INT(2, 1000), '1001')],
  ['profile', 'tolerance', ['--tolerance', 'much'], 'RDK_OPTION', cliInvalid('tolerance', TOLERANCE_EXPECTED, '"much"')],
  ['profile', 'threads', ['--threads', '257'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '257')],
  ['profile', 'memory', ['--memory', '12XB'], 'RDK_OPTION', cliInvalid('memory', SIZE_EXPECTED, '"12XB"')],
  ['profile', 'format', ['--format', 'parquet'], 'RDK_OPTION', cliInvalid('format', '"csv", "tsv" or "jsonl"', '"parquet"')],
  ['profile', 'delimiter', ['--delimiter', '"'], 'RDK_OPTION', cliInvalid('delimiter', DELIMITER_EXPECTED, '"\\""')],
  ['profile', 'header', ['--no-header=1'], 'RDK_OPTION', 'Invalid option --no-header: it takes no value (it is a switch), got "1"'],
  ['profile', 'onBadRecord', ['--on-bad-record', 'quarantine'], 'RDK_OPTION', cliInvalid('on-bad-record', PROFILE_POLICY, '"quarantine"')],
  ['profile', 'excludeValues', ['--exclude-values=1'], 'RDK_OPTION', 'Invalid option --exclude-values: it takes no value (it is a switch), got "1"'],
  ['profile', '(unknown)', ['--out', 'x'], 'RDK_UNKNOWN_OPTION', 'Unknown option --out for rowdeck profile. See rowdeck profile --help.'],
  ['profile', '(unknown)', ['--statify', 'fault'], 'RDK_UNKNOWN_OPTION', 'Unknown option --statify for rowdeck profile. Did you mean --stratify? See rowdeck profile --help.'],
  ['verify', 'dir', [], 'RDK_MISSING_ARGUMENT', 'rowdeck verify needs DIR, the output folder of rowdeck shuffle (it holds manifest.json).', true],
  ['verify', 'dir', ['out', 'in.csv'], 'RDK_OPTION', 'rowdeck verify takes one DIR, got 2: out, in.csv. To compare with inputs, list them after --against.', true],
  ['verify', 'against', ['--against'], 'RDK_OPTION', 'Invalid option --against: expected INPUT... after it, got nothing'],
  ['verify', 'against', ['--against', '-', '-'], 'RDK_OPTION', cliInvalid('against', PATHS_EXPECTED, '"-" "-"')],
  ['verify', 'replay', ['--no-replay=yes'], 'RDK_OPTION', 'Invalid option --no-replay: it takes no value (it is a switch), got "yes"'],
  ['verify', 'tempDir', ['--temp-dir'], 'RDK_OPTION', 'Invalid option --temp-dir: expected DIR after it, got nothing'],
  ['verify', 'memory', ['--memory', '0'], 'RDK_OPTION', cliInvalid('memory', SIZE_EXPECTED, '"0"')],
  ['verify', 'threads', ['--threads', 'two'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '"two"')],
  ['verify', '(unknown)', ['--aginst', 'a.csv'], 'RDK_UNKNOWN_OPTION', 'Unknown option --aginst for rowdeck verify. Did you mean --against? See rowdeck verify --help.'],
  ['report', 'dir', [], 'RDK_MISSING_ARGUMENT', 'rowdeck report needs DIR, the output folder of rowdeck shuffle (it holds manifest.json).', true],
  ['report', 'dir', ['a', 'b'], 'RDK_OPTION', 'rowdeck report takes one DIR, got 2: a, b.', true],
  ['report', 'verify', ['--verify=yes'], 'RDK_OPTION', 'Invalid option --verify: it takes no value (it is a switch), got "yes"'],
  ['report', 'threads', ['--threads', '1.5'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '"1.5"')],
  ['report', '(unknown)', ['--json'], 'RDK_UNKNOWN_OPTION', 'Unknown option --json for rowdeck report. See rowdeck report --help.'],
  ['plan', 'work', ['in.csv', '--out', 'out', '--tasks', '2'], 'RDK_MISSING_ARGUMENT', "rowdeck plan needs --work WORK, a new folder on a file system every node sees, for the tasks' files.", true],
  ['plan', 'tasks', ['in.csv', '--out', 'out', '--work', 'w'], 'RDK_MISSING_ARGUMENT', 'rowdeck plan needs --tasks N, the number of scatter tasks to cut the inputs into.', true],
  ['plan', 'tasks', ['--tasks', 'many'], 'RDK_OPTION', cliInvalid('tasks', INT(1, 100000), '"many"')],
  ['plan', 'gatherTasks', ['--gather-tasks', '0'], 'RDK_OPTION', cliInvalid('gather-tasks', INT(1, 100000), '0')],
  ['plan', 'threads', ['--threads', 'x'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '"x"')],
  ['plan', 'memory', ['--memory', '1KiB'], 'RDK_OPTION', cliInvalid('memory', SIZE_EXPECTED, '"1KiB"')],
  ['plan', 'image', ['--image='], 'RDK_OPTION', cliInvalid('image', 'an image name', '""')],
  ['plan', 'claim', ['--claim'], 'RDK_OPTION', 'Invalid option --claim: expected NAME after it, got nothing'],
  ['plan', 'mountPath', ['--mount-path', 'data'], 'RDK_OPTION', cliInvalid('mount-path', 'an absolute path', '"data"')],
  ['plan', '(unknown)', ['--temp-dir', '/tmp'], 'RDK_UNKNOWN_OPTION', 'Unknown option --temp-dir for rowdeck plan. See rowdeck plan --help.'],
  ['task', 'work', ['--stage', 'deal'], 'RDK_MISSING_ARGUMENT', 'rowdeck task needs WORK, the work folder of a plan (rowdeck plan --work).', true],
  ['task', 'stage', ['w'], 'RDK_MISSING_ARGUMENT', 'rowdeck task needs --stage S, the stage to run: scatter, deal or gather.', true],
  ['task', 'stage', ['w', '--stage', 'finish'], 'RDK_OPTION', cliInvalid('stage', '"scatter", "deal" or "gather"', '"finish"'), true],
  ['task', 'index', ['--index'], 'RDK_OPTION', 'Invalid option --index: expected I after it, got nothing'],
  ['finish', 'work', [], 'RDK_MISSING_ARGUMENT', 'rowdeck finish needs WORK, the work folder of a plan (rowdeck plan --work).', true],
  ['finish', 'keepWork', ['--keep-work=1'], 'RDK_OPTION', 'Invalid option --keep-work: it takes no value (it is a switch), got "1"'],
  ['finish', 'threads', ['--threads', 'x'], 'RDK_OPTION', cliInvalid('threads', INT(0, 256), '"x"')],
  ['status', 'work', ['a', 'b'], 'RDK_OPTION', 'rowdeck status takes one WORK, got 2: a, b.', true],
];

describe('the command line: a good value of every flag, and what the engine gets', () => {
  it.each(CLI_GOOD.map((r) => [r[0], r[2].join(' ') || '(the base arguments)', r] as const))('%s %s', (_c, _a, [cmd, , argv, pick, want]) => {
    expect(pick(commandLine(cmd, argv).resolved)).toEqual(want);
  });
});

describe('the command line: each kind of bad value, its code and its message (spelled as typed)', () => {
  it.each(CLI_BAD.map((r) => [r[0], r[2].join(' ') || '(nothing)', r] as const))('%s %s', (_c, _a, [cmd, , argv, code, message, bare]) => {
    const e = thrown(() => commandLine(cmd, argv, bare === true));
    expect(e.code).toBe(code);
    expect(e.message).toBe(message);
    expect(e.isUsage).toBe(true);
    // Never the library's internal spelling of a flag on the command line.
    expect(e.message).not.toMatch(/"(?:onBadRecord|foldColumn|excludeValues|tempDir|onProgress|onNotice)"/);
  });
});

/** The command line's own flags: [command, argv, own value]. */
const OWN_GOOD: [Command, string, string[], unknown][] = [
  ['shuffle', 'json', ['--json'], true],
  ['shuffle', 'quiet', ['--quiet'], true],
  ['shuffle', 'help', ['-h'], true],
  ['profile', 'html', ['--html', 'p.html'], 'p.html'],
  ['profile', 'json', ['--json'], true],
  ['profile', 'quiet', ['--quiet'], true],
  ['profile', 'help', ['--help'], true],
  ['verify', 'json', ['--json'], true],
  ['verify', 'quiet', ['--quiet'], true],
  ['verify', 'help', ['-h'], true],
  ['report', 'quiet', ['--quiet'], true],
  ['report', 'help', ['--help'], true],
  ['plan', 'json', ['--json'], true],
  ['plan', 'quiet', ['--quiet'], true],
  ['plan', 'help', ['-h'], true],
  ['task', 'quiet', ['--quiet'], true],
  ['task', 'help', ['-h'], true],
  ['finish', 'json', ['--json'], true],
  ['finish', 'quiet', ['--quiet'], true],
  ['finish', 'help', ['--help'], true],
  ['status', 'json', ['--json'], true],
  ['status', 'help', ['--help'], true],
];
const OWN_BAD: [Command, string, string[], string][] = [
  ['shuffle', 'json', ['--json=1'], 'Invalid option --json: it takes no value (it is a switch), got "1"'],
  ['shuffle', 'quiet', ['--quiet=1'], 'Invalid option --quiet: it takes no value (it is a switch), got "1"'],
  ['shuffle', 'help', ['--help=me'], 'Invalid option --help: it takes no value (it is a switch), got "me"'],
  ['profile', 'html', ['--html'], 'Invalid option --html: expected FILE after it, got nothing'],
  ['profile', 'json', ['--json=x'], 'Invalid option --json: it takes no value (it is a switch), got "x"'],
  ['profile', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['profile', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['verify', 'json', ['--json=x'], 'Invalid option --json: it takes no value (it is a switch), got "x"'],
  ['verify', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['verify', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['report', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['report', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['plan', 'json', ['--json=x'], 'Invalid option --json: it takes no value (it is a switch), got "x"'],
  ['plan', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['plan', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['task', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['task', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['finish', 'json', ['--json=x'], 'Invalid option --json: it takes no value (it is a switch), got "x"'],
  ['finish', 'quiet', ['--quiet=x'], 'Invalid option --quiet: it takes no value (it is a switch), got "x"'],
  ['finish', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
  ['status', 'json', ['--json=x'], 'Invalid option --json: it takes no value (it is a switch), got "x"'],
  ['status', 'help', ['--help=x'], 'Invalid option --help: it takes no value (it is a switch), got "x"'],
];

describe("the command line's own flags (--json, --quiet, --html, --help)", () => {
  it.each(OWN_GOOD)('%s --%s', (cmd, flag, argv, want) => {
    expect(parseCommandLine(SPECS[cmd], [...CLI_BASE[cmd], ...argv]).own[flag]).toEqual(want);
  });
  it.each(OWN_BAD)('%s --%s: %s', (cmd, _flag, argv, message) => {
    const e = thrown(() => parseCommandLine(SPECS[cmd], [...CLI_BASE[cmd], ...argv]));
    expect([e.code, e.message]).toEqual(['RDK_OPTION', message]);
  });
});

// --- one meaning everywhere ----------------------------------------------------------------------

describe('the same option means and is checked the same in every command', () => {
  // What issue reports found drifting apart: each pair must now agree.
  it.each([
    ['stratify "c,c"', { stratify: 'c,c' }],
    ['partitions "2" (text)', { partitions: '2' }],
    ['threads "x"', { threads: 'x' }],
    ['threads 257', { threads: 257 }],
    ['memory "lots"', { memory: 'lots' }],
    ['delimiter ";;"', { delimiter: ';;' }],
    ['format "xml"', { format: 'xml' }],
  ] as const)('%s: the same code and message from every command that takes it', (_what, extra) => {
    const key = Object.keys(extra)[0]!;
    const messages = (['shuffle', 'profile', 'verify', 'report'] as const)
      .filter((cmd) => Object.hasOwn(SPECS[cmd].table, key))
      .map((cmd) => {
        const e = thrown(() => library(cmd, extra));
        return `${e.code} ${e.message}`;
      });
    expect(messages.length).toBeGreaterThan(1);
    expect(new Set(messages).size).toBe(1);
  });

  it('--threads 0 is the calling thread in every command (accepted by each, kept as 0)', () => {
    for (const cmd of ['shuffle', 'profile', 'verify', 'report'] as const) expect(commandLine(cmd, ['--threads', '0']).resolved.threads, cmd).toBe(0);
    expect((commandLine('plan', ['--threads', '0']).resolved.shuffle as { threads: number }).threads).toBe(0);
  });

  it("plan takes shuffle's own definitions for every shuffle option but the spill's folder, threads and memory (each task's)", () => {
    const shuffleKeys = Object.keys(SHUFFLE_OPTIONS).filter((k) => k !== 'tempDir' && k !== 'threads' && k !== 'memory');
    expect(PLAN_FROM_SHUFFLE.sort()).toEqual(shuffleKeys.sort());
    // So plan refuses what shuffle refuses, with the same message.
    const a = thrown(() => library('plan', { split: 'a=0.7,b=0.2' }));
    const b = thrown(() => library('shuffle', { split: 'a=0.7,b=0.2' }));
    expect([a.code, a.message]).toEqual([b.code, b.message]);
  });

  it('every flag is the library key in kebab case, except the --no- switches of options that default to on', () => {
    for (const spec of Object.values(SPECS)) {
      for (const [key, def] of Object.entries(spec.table)) {
        if (!def.cli || !('flag' in def.cli)) continue;
        const kebab = key.replace(/[A-Z]/g, (c) => `-${c.toLowerCase()}`);
        expect(def.cli.flag, `${spec.command} ${key}`).toBe(def.cli.negated ? `no-${kebab}` : kebab);
      }
    }
  });
});

describe('suggestions: edit distance (optimal string alignment)', () => {
  // Values worked by hand: one edit each for a deletion, an insertion, a substitution and a swap
  // of neighbours; "kitten" -> "sitting" is the textbook 3 (from memory: Levenshtein's example).
  it.each([
    ['partitons', 'partitions', 1],
    ['partitionss', 'partitions', 1],
    ['partitiens', 'partitions', 1],
    ['parittions', 'partitions', 1],
    ['kitten', 'sitting', 3],
    ['', 'abc', 3],
  ] as const)('%s -> %s: %i', (a, b, d) => {
    expect(editDistance(a, b)).toBe(d);
  });
  it('suggests only what is close (a third of the word) and ignores case', () => {
    expect(closest('shufle', ['shuffle', 'profile', 'verify', 'report'])).toBe('shuffle');
    expect(closest('PROFILE', ['shuffle', 'profile'])).toBe('profile');
    expect(closest('frobnicate', ['shuffle', 'profile', 'verify', 'report'])).toBeNull();
  });
  it('an unknown command gets a did-you-mean', async () => {
    const err: string[] = [];
    const io = { stdout: { write: () => true } as unknown as NodeJS.WritableStream, stderr: { write: (s: string) => err.push(s) > 0 } as unknown as NodeJS.WritableStream };
    expect(await runCli(['verfiy', 'out'], io)).toBe(2);
    expect(err.join('')).toContain('rowdeck: error RDK_UNKNOWN_COMMAND: unknown command "verfiy". Did you mean "verify"? Commands: shuffle, profile, verify, report, plan, task, finish, status.');
  });
});

// --- coverage of the tables ----------------------------------------------------------------------

describe('the rows cover every option, and --help lists exactly the table', () => {
  it.each(Object.keys(SPECS) as Command[])('%s: every library option has a good row and a bad row', (cmd) => {
    const libraryKeys = Object.keys(SPECS[cmd].table).filter((k) => !(cmd === 'report' && k === 'dir') && !(cmd === 'plan' && PLAN_FROM_SHUFFLE.includes(k)));
    for (const key of libraryKeys) {
      expect(LIBRARY_GOOD.some((r) => r[0] === cmd && r[1] === key), `${cmd} ${key}: good`).toBe(true);
      expect(LIBRARY_BAD.some((r) => r[0] === cmd && r[1] === key), `${cmd} ${key}: bad`).toBe(true);
    }
  });

  it.each(Object.keys(SPECS) as Command[])('%s: every command-line option (flags and arguments) has a good row and a bad row', (cmd) => {
    const spec = SPECS[cmd];
    for (const [key, def] of Object.entries(spec.table)) {
      if (!def.cli || (cmd === 'plan' && PLAN_FROM_SHUFFLE.includes(key))) continue;
      expect(CLI_GOOD.some((r) => r[0] === cmd && r[1] === key), `${cmd} ${key}: good`).toBe(true);
      expect(CLI_BAD.some((r) => r[0] === cmd && r[1] === key), `${cmd} ${key}: bad`).toBe(true);
    }
    for (const own of Object.keys(spec.cliOnly)) {
      expect(OWN_GOOD.some((r) => r[0] === cmd && r[1] === own), `${cmd} --${own}: good`).toBe(true);
      expect(OWN_BAD.some((r) => r[0] === cmd && r[1] === own), `${cmd} --${own}: bad`).toBe(true);
    }
  });

  it.each(Object.keys(SPECS) as Command[])('%s --help lists every flag of the table and no other', (cmd) => {
    // The option lines of the help: two spaces, an optional short form, then the flag.
    const listed = [...HELP[cmd].matchAll(/^ {2}(?:-[a-zA-Z], )?--([a-z][a-z-]*)/gm)].map((m) => m[1]!);
    // plan lists its own options and refers to shuffle's for the rest.
    const own = cmd === 'plan' ? cliFlags(SPECS[cmd]).filter((f) => !PLAN_FROM_SHUFFLE.some((k) => (SHUFFLE_OPTIONS as Record<string, { cli: unknown }>)[k]!.cli && ((SHUFFLE_OPTIONS as Record<string, { cli: { flag?: string } | null }>)[k]!.cli?.flag === f))) : cliFlags(SPECS[cmd]);
    expect(listed.sort()).toEqual(own.sort());
    if (cmd === 'plan') expect(HELP.plan).toContain('Besides every option of rowdeck shuffle but --temp-dir');
    // Short forms: only those in the table (-h), and each listed.
    const shorts = [...HELP[cmd].matchAll(/^ {2}-([a-zA-Z]), --/gm)].map((m) => m[1]!);
    expect(shorts).toEqual(Object.values(SPECS[cmd].cliOnly).flatMap((d) => (d.short ? [d.short] : [])));
  });
});
