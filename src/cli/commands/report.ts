/**
 * `rowdeck report DIR [--verify]`: a thin layer over the library's writeReport(). Writes
 * DIR/report.html and prints its path on stdout; with --verify, re-reads every part first and
 * exits 1 (the page still written, showing what failed) when a check fails.
 */
import type { VerifyProgress } from '../../engine/verify.js';
import { writeReport } from '../../report/write.js';
import { fromCommandLine, REPORT_SPEC, type ReportOptions } from '../../options.js';
import { parseCommandLine } from '../args.js';
import { REPORT_HELP } from '../help.js';
import type { CliIO } from '../main.js';
import { REDRAW_MS } from '../progress.js';
import { formatMismatches } from './verify.js';

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(REPORT_SPEC, argv);
  if (v.help) {
    io.stdout.write(REPORT_HELP);
    return 0;
  }
  // The folder is writeReport's first argument; the rest are its options.
  const { dir, ...rest } = options as ReportOptions & { dir?: string };
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
    result = await writeReport(dir as string, fromCommandLine({ ...rest, onProgress: progress }));
  } finally {
    if (shown) io.stderr.write('\r\x1b[K');
  }
  io.stdout.write(`${result.path}\n`);
  const r = result.verify;
  if (r && !r.ok) {
    io.stderr.write(formatMismatches(r).map((l) => `${l}\n`).join(''));
    io.stderr.write(`rowdeck: ${dir} does not match its manifest (RDK_VERIFY_FAILED): ${r.mismatches.length} mismatch(es); the report shows them.\n`);
    return 1;
  }
  if (!v.quiet) {
    const checked = r ? `; verify passed (${r.checks.filter((c) => c.status === 'passed').length} checks)` : '';
    io.stderr.write(`rowdeck: wrote the report of ${dir} (${result.manifest.output.parts.length} part(s))${checked}.\n`);
  }
  return 0;
}
