/**
 * `rowdeck shuffle INPUT... --out DIR [options]`: the options from the command line (read by
 * shuffle's option table), the library's runShuffle(), then the summary on stderr.
 */
import { runShuffle } from '../../engine/shuffle.js';
import { SHUFFLE_SPEC } from '../../options.js';
import { parseCommandLine } from '../args.js';
import { shuffleHelp } from '../help.js';
import { defaultMemory } from '../../io/memory-available.js';
import type { CliIO } from '../main.js';
import { createProgress } from '../progress.js';
import { formatShuffleSummary } from '../summary.js';

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { options, own } = parseCommandLine(SHUFFLE_SPEC, argv);
  if (own.help) {
    io.stdout.write(shuffleHelp(defaultMemory()));
    return 0;
  }
  const progress = createProgress(io.stderr, !own.quiet);
  const opts = options;
  opts.onProgress = (e) => progress.update(e);
  // What was cleaned up that was not this run's own, warnings, or what a signal made it remove: always said.
  opts.onNotice = (text) => io.stderr.write(`rowdeck: ${text}\n`);
  let result;
  try {
    result = await runShuffle(opts);
  } finally {
    progress.done();
  }
  const m = result.manifest;
  if (own.json) io.stdout.write(JSON.stringify(m, null, 2) + '\n');
  if (!own.quiet) {
    // The table is for people at a terminal; with --json or into a file, the one line.
    const table = io.stderr.isTTY === true && !own.json;
    const lines = formatShuffleSummary(m, { width: io.stderr.columns ?? 80, out: result.out, report: result.report, table });
    io.stderr.write(lines.map((l) => `${l}\n`).join(''));
  }
  return 0;
}
