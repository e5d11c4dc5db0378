/**
 * `rowdeck verify DIR [--against INPUT...]`: a thin layer over the library's verify(). The
 * report decides the exit status: 0 when every check holds, 1 with every mismatch on stderr.
 */
import { verify, type VerifyProgress, type VerifyReport } from '../../engine/verify.js';
import { VERIFY_SPEC } from '../../options.js';
import { parseCommandLine } from '../args.js';
import { VERIFY_HELP } from '../help.js';
import type { CliIO } from '../main.js';
import { REDRAW_MS } from '../progress.js';
import { formatVerifyChecks } from '../summary.js';

function createVerifyProgress(io: CliIO, enabled: boolean): { update(e: VerifyProgress): void; done(): void } {
  if (!enabled || !io.stderr.isTTY) return { update() {}, done() {} };
  let shown = false;
  let last = -Infinity;
  return {
    update(e) {
      const now = Date.now();
      if (now - last < REDRAW_MS) return;
      last = now;
      io.stderr.write(`\rverify ${e.stage.padEnd(6)} ${e.done}/${e.total} files, ${e.records.toLocaleString('en-US')} records\x1b[K`);
      shown = true;
    },
    done() {
      if (shown) io.stderr.write('\r\x1b[K');
    },
  };
}

/** One line per mismatch: `file[:line]: check (item): expected X, found Y`. */
export function formatMismatches(r: VerifyReport): string[] {
  const lines = r.mismatches.map((x) => `${x.file}${x.line !== undefined ? `:${x.line}` : ''}: ${x.check}${x.item !== undefined ? ` (${x.item})` : ''}: expected ${x.expected}, found ${x.found}`);
  const d = r.against?.differences;
  if (d) {
    for (const x of d.listed) {
      const copies = x.kind === 'missing' ? (x.copies.input > 1 ? ` (${x.copies.output} of ${x.copies.input} identical copies are in the output)` : '') : x.copies.output > 1 ? ` (${x.copies.output} identical copies in the output, ${x.copies.input} in the inputs)` : '';
      lines.push(`${x.file}:${x.line}: ${x.kind === 'missing' ? 'missing from the output' : 'not in the inputs'}${copies}: ${x.record}`);
    }
    const shownMissing = d.listed.filter((x) => x.kind === 'missing').length;
    const shownExtra = d.listed.length - shownMissing;
    if (d.missing > shownMissing) lines.push(`… ${d.missing - shownMissing} more record(s) missing from the output${d.listing === 'counts only' ? ' (too many records to list them)' : ''}`);
    if (d.extra > shownExtra) lines.push(`… ${d.extra - shownExtra} more record(s) not in the inputs${d.listing === 'counts only' ? ' (too many records to list them)' : ''}`);
  }
  return lines;
}

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { options, own: v } = parseCommandLine(VERIFY_SPEC, argv);
  if (v.help) {
    io.stdout.write(VERIFY_HELP);
    return 0;
  }
  const opts = options;
  const dir = opts.dir;
  const progress = createVerifyProgress(io, !v.quiet);
  opts.onProgress = (e) => progress.update(e);
  let report: VerifyReport;
  try {
    report = await verify(opts);
  } finally {
    progress.done();
  }
  if (v.json) io.stdout.write(JSON.stringify(report, null, 2) + '\n');
  const lines = formatMismatches(report);
  if (lines.length > 0) io.stderr.write(lines.map((l) => `${l}\n`).join(''));
  if (!v.quiet) {
    const passed = report.checks.filter((c) => c.status === 'passed').length;
    const skipped = report.checks.filter((c) => c.status === 'skipped').length;
    const skippedText = skipped > 0 ? `, ${skipped} skipped (see --json)` : '';
    io.stderr.write(formatVerifyChecks(report, io.stderr.columns ?? 100).map((l) => `${l}\n`).join(''));
    const replay = report.replay ? `; replay ${report.replay.status}: ${report.replay.note}` : '';
    if (report.ok) {
      const inputs = report.against ? `; the input(s) hold the same ${report.against.records.toLocaleString('en-US')} records` : '';
      io.stderr.write(`rowdeck: ${dir} matches its manifest: ${report.parts} part(s), ${report.records.toLocaleString('en-US')} records, ${passed} checks passed${skippedText}${inputs}${replay}.\n`);
    } else {
      const files = new Set(report.mismatches.map((x) => x.file)).size;
      io.stderr.write(
        `rowdeck: ${dir} does not match its manifest (RDK_VERIFY_FAILED): ${report.mismatches.length} mismatch(es) in ${files} file(s); ${passed} checks passed${skippedText}${replay}.\n`,
      );
    }
    if (report.dealingScheme === 1) {
      io.stderr.write(`rowdeck: ${dir} was written by dealing scheme 1 (rowdeck 0.1): its classes are evenly interleaved inside each part, not shuffled. Run the shuffle again with this version for a random order.\n`);
    }
  }
  return report.ok ? 0 : 1;
}
