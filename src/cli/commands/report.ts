/**
 * `rowdeck report DIR [--verify]`: a thin layer over the library's writeReport(). Writes
 * DIR/report.html and prints its path on stdout; with --verify, re-reads every part first and
 * exits 1 (the page still written, showing what failed) when a check fails.
 */
import { RowdeckError } from '../../errors.js';
import type { VerifyProgress } from '../../engine/verify.js';
import { writeReport } from '../../report/write.js';
import { intArg, parseCommandArgs } from '../args.js';
import { REPORT_HELP } from '../help.js';
import type { CliIO } from '../main.js';
import { REDRAW_MS } from '../progress.js';
import { formatMismatches } from './verify.js';

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { values: v, positionals } = parseCommandArgs(argv, {
    verify: { type: 'boolean' },
    threads: { type: 'string' },
    quiet: { type: 'boolean' },
    help: { type: 'boolean', short: 'h' },
  });
  if (v.help) {
    io.stdout.write(REPORT_HELP);
    return 0;
  }
  if (positionals.length === 0) throw new RowdeckError('ERR_MISSING_ARGUMENT', 'rowdeck report needs DIR, the output folder of rowdeck shuffle (it holds manifest.json).');
  if (positionals.length > 1) throw new RowdeckError('ERR_OPTION', `rowdeck report writes the report of one folder, got ${positionals.length}: ${positionals.join(', ')}.`);
  const dir = positionals[0]!;
  const threads = intArg('threads', v.threads);
  let last = -Infinity;
  let shown = false;
  const progress = (e: VerifyProgress): void => {
    if (v.quiet || !io.stderr.isTTY || Date.now() - last < REDRAW_MS) return;
    last = Date.now();
    io.stderr.write(`\rverify ${e.stage.padEnd(6)} ${e.done}/${e.total} files, ${e.records.toLocaleString('en-US')} records\x1b[K`);
    shown = true;
  };
  let result;
  try {
    result = await writeReport(dir, { verify: v.verify === true, ...(threads !== undefined ? { threads } : {}), onProgress: progress });
  } finally {
    if (shown) io.stderr.write('\r\x1b[K');
  }
  io.stdout.write(`${result.path}\n`);
  const r = result.verify;
  if (r && !r.ok) {
    io.stderr.write(formatMismatches(r).map((l) => `${l}\n`).join(''));
    io.stderr.write(`rowdeck: ${dir} does not match its manifest (ERR_VERIFY_FAILED): ${r.mismatches.length} mismatch(es); the report shows them.\n`);
    return 1;
  }
  if (!v.quiet) {
    const checked = r ? `; verify passed (${r.checks.filter((c) => c.status === 'passed').length} checks)` : '';
    io.stderr.write(`rowdeck: wrote the report of ${dir} (${result.manifest.output.parts.length} part(s))${checked}.\n`);
  }
  return 0;
}
