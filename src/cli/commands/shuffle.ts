import { RowdeckError } from '../../errors.js';
import { runShuffle } from '../../engine/shuffle.js';
import type { ShuffleOptions } from '../../options.js';
import type { BadRecordPolicy, InputFormat } from '../../io/batch.js';
import { INPUT_OPTIONS, intArg, numArg, parseCommandArgs, strArg, type OptionSpec } from '../args.js';
import { shuffleHelp } from '../help.js';
import { defaultMemory } from '../../io/memory-available.js';
import type { CliIO } from '../main.js';
import { createProgress } from '../progress.js';
import { formatShuffleSummary } from '../summary.js';

/** The options of `shuffle` (and of `plan`, which takes every shuffle option). */
export const SHUFFLE_CLI_OPTIONS: OptionSpec = {
  ...INPUT_OPTIONS,
  out: { type: 'string', short: 'o' },
  seed: { type: 'string' },
  partitions: { type: 'string', short: 'p' },
  stratify: { type: 'string' },
  tolerance: { type: 'string' },
  folds: { type: 'string' },
  'fold-column': { type: 'string' },
  split: { type: 'string' },
  group: { type: 'string' },
  key: { type: 'string' },
  assign: { type: 'string' },
  order: { type: 'string' },
  memory: { type: 'string' },
  threads: { type: 'string' },
  'temp-dir': { type: 'string' },
  gzip: { type: 'boolean' },
  force: { type: 'boolean' },
  stats: { type: 'boolean' },
  report: { type: 'boolean' },
};

/** The library options the parsed command line asks for (the inputs, the output, and every shuffle option). */
export function shuffleOptionsOf(v: Record<string, string | boolean | string[] | undefined>, positionals: string[], command: string): ShuffleOptions {
  if (positionals.length === 0) throw new RowdeckError('ERR_MISSING_ARGUMENT', `rowdeck ${command} needs at least one INPUT file${command === 'shuffle' ? ' (or - for stdin)' : ''}.`);
  if (v.out === undefined) throw new RowdeckError('ERR_MISSING_ARGUMENT', `rowdeck ${command} needs --out DIR, the folder to write the parts and the manifest to.`);
  const opts: ShuffleOptions = { inputs: positionals, out: String(v.out) };
  const set = <K extends keyof ShuffleOptions>(k: K, val: ShuffleOptions[K] | undefined): void => {
    if (val !== undefined) opts[k] = val;
  };
  set('seed', strArg(v.seed));
  set('partitions', intArg('partitions', v.partitions));
  set('stratify', strArg(v.stratify));
  set('tolerance', numArg('tolerance', v.tolerance));
  set('folds', intArg('folds', v.folds));
  set('foldColumn', strArg(v['fold-column']));
  set('split', strArg(v.split));
  set('group', strArg(v.group));
  set('key', strArg(v.key));
  set('assign', strArg(v.assign) as ShuffleOptions['assign']);
  set('order', strArg(v.order) as ShuffleOptions['order']);
  set('memory', strArg(v.memory));
  set('threads', intArg('threads', v.threads));
  set('tempDir', strArg(v['temp-dir']));
  set('format', strArg(v.format) as InputFormat | undefined);
  set('delimiter', strArg(v.delimiter));
  if (v['no-header']) opts.header = false;
  if (v.gzip) opts.gzip = true;
  if (v.force) opts.force = true;
  if (v['exclude-values']) opts.excludeValues = true;
  if (v.stats) opts.stats = true;
  if (v.report) opts.report = true;
  set('onBadRecord', strArg(v['on-bad-record']) as BadRecordPolicy | undefined);
  return opts;
}

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { values: v, positionals } = parseCommandArgs(argv, SHUFFLE_CLI_OPTIONS);
  if (v.help) {
    io.stdout.write(shuffleHelp(defaultMemory()));
    return 0;
  }
  const progress = createProgress(io.stderr, !v.quiet);
  const opts: ShuffleOptions = {
    ...shuffleOptionsOf(v, positionals, 'shuffle'),
    onProgress: (e) => progress.update(e),
    // What was cleaned up that was not this run's own, or what a signal made it remove: always said.
    onNotice: (text) => io.stderr.write(`rowdeck: ${text}\n`),
  };
  let result;
  try {
    result = await runShuffle(opts);
  } finally {
    progress.done();
  }
  const m = result.manifest;
  if (v.json) io.stdout.write(JSON.stringify(m, null, 2) + '\n');
  if (!v.quiet) {
    // The table is for people at a terminal; with --json or into a file, the one line.
    const table = io.stderr.isTTY === true && !v.json;
    const lines = formatShuffleSummary(m, { width: io.stderr.columns ?? 80, out: result.out, report: result.report, table });
    io.stderr.write(lines.map((l) => `${l}\n`).join(''));
  }
  return 0;
}
