/**
 * `rowdeck profile INPUT... [options]`: a thin layer over the library's profile(). Prints the
 * schema and statistics as an aligned table, the class balance of each stratify column as a bar
 * chart, and the warnings; `--json` prints the Profile itself. Progress on stderr (terminals only).
 */
import { profile, type Profile, type ProfileClass } from '../../engine/profile.js';
import type { ColumnSummary } from '../../core/stats.js';
import { stratumLabel } from '../../core/strata.js';
import { PROFILE_SPEC, type ProgressEvent } from '../../options.js';
import { parseCommandLine } from '../args.js';
import { PROFILE_HELP } from '../help.js';
import type { CliIO } from '../main.js';
import { createProgress, formatBytes } from '../progress.js';
import { cutText, padEnd, padStart, showValue, widthOf } from '../text.js';
import { writeProfileReport } from '../../report/write.js';

export const DATA_VALUES_NOTE =
  'Note: this profile shows values from the data (min/max, frequent values, class names). Pass --exclude-values to leave them out before sharing it.';

export async function run(argv: string[], io: CliIO): Promise<number> {
  const { options, own } = parseCommandLine(PROFILE_SPEC, argv);
  if (own.help) {
    io.stdout.write(PROFILE_HELP);
    return 0;
  }
  const progress = createProgress(io.stderr, !own.quiet);
  const opts = options;
  // The shared progress line knows shuffle's stages; 'read'/'bins' print the same way.
  opts.onProgress = (e) => progress.update({ ...e, stage: e.stage as string as ProgressEvent['stage'] });
  let p: Profile;
  try {
    p = await profile(opts);
  } finally {
    progress.done();
  }
  if (typeof own.html === 'string') {
    const file = writeProfileReport(p, own.html);
    if (!own.quiet) io.stderr.write(`rowdeck: wrote the profile page ${file}${p.excludeValues ? '' : ' (it shows values from the data: pass --exclude-values to leave them out)'}.\n`);
  }
  if (own.json) {
    io.stdout.write(JSON.stringify(p, null, 2) + '\n');
    if (!own.quiet && !p.excludeValues) io.stderr.write(`rowdeck: ${DATA_VALUES_NOTE}\n`);
  } else {
    io.stdout.write(renderProfile(p).join('\n') + '\n');
  }
  return 0;
}

// --- rendering ---------------------------------------------------------------------------------------

const BAR_WIDTH = 24;
const EIGHTHS = ['', '▏', '▎', '▍', '▌', '▋', '▊', '▉'];

export { cutText };

function formatCount(n: number): string {
  return n.toLocaleString('en-US');
}

/** Six significant digits, no trailing zeros, plain notation where it stays short. */
export function formatNumber(x: number): string {
  if (Number.isInteger(x) && Math.abs(x) < 1e15) return String(x);
  const a = Math.abs(x);
  if (a !== 0 && (a < 1e-4 || a >= 1e15)) return x.toExponential(5).replace(/\.?0+e/, 'e');
  return String(Number(x.toPrecision(6)));
}

function formatMinMax(v: number | string | null): string {
  if (v === null) return '-';
  return typeof v === 'number' ? formatNumber(v) : showValue(v);
}

function formatTop(c: ColumnSummary): string {
  if (c.top === null) return c.approximate ? '(too many values to list)' : '-';
  return c.top.map((t) => `${showValue(t.value)} ${((t.count / Math.max(1, c.count)) * 100).toFixed(1)}%`).join(', ');
}

/** Table rows: aligned columns, long cells cut with …. */
function renderTable(header: string[], rows: string[][], maxWidths: number[], rightAligned: boolean[]): string[] {
  const cells = rows.map((r) => r.map((s, i) => cutText(s, maxWidths[i]!)));
  const widths = header.map((h, i) => Math.max(widthOf(h), ...cells.map((r) => widthOf(r[i]!))));
  const line = (r: string[]): string =>
    r
      .map((s, i) => (rightAligned[i] ? padStart(s, widths[i]!) : i === r.length - 1 ? s : padEnd(s, widths[i]!)))
      .join('  ')
      .trimEnd();
  return [line(header), ...cells.map(line)];
}

/** A horizontal bar: full blocks and one partial eighth block; `fraction` in [0, 1]. */
export function drawBar(fraction: number, width = BAR_WIDTH): string {
  const eighths = Math.round(Math.max(0, Math.min(1, fraction)) * width * 8);
  const bar = '█'.repeat(Math.floor(eighths / 8)) + EIGHTHS[eighths % 8]!;
  // A class with any records shows at least a sliver.
  return bar === '' && fraction > 0 ? '▏' : bar;
}

/** A class's label (core/strata.ts), control characters shown as escapes. */
function describeClassValue(c: ProfileClass, index: number): string {
  return showValue(stratumLabel(c.value, index));
}

function renderClasses(title: string, classes: ProfileClass[]): string[] {
  const out = [title];
  const largest = Math.max(1, ...classes.map((c) => c.count));
  const names = classes.map((c, i) => cutText(describeClassValue(c, i), 32));
  const nameW = Math.max(...names.map(widthOf));
  const countW = Math.max(...classes.map((c) => formatCount(c.count).length));
  classes.forEach((c, i) => {
    out.push(`  ${padEnd(names[i]!, nameW)}  ${padStart(formatCount(c.count), countW)}  ${padStart((c.share * 100).toFixed(1) + '%', 6)} ${drawBar(c.count / largest)}`);
  });
  return out;
}

/** The whole text report, line by line. */
export function renderProfile(p: Profile): string[] {
  const out: string[] = [];
  const bytes = p.inputs.reduce((a, x) => a + x.bytes, 0);
  const inputs = p.inputs.length === 1 ? p.inputs[0]!.path : `${p.inputs.length} inputs`;
  out.push(
    `${inputs}: ${formatCount(p.records)} records (${formatBytes(bytes)}), ${p.columns.length} columns` +
      (p.rejected > 0 ? `, ${formatCount(p.rejected)} malformed record(s) left out` : ''),
  );
  out.push('');
  const rows = p.columns.map((c) => [
    c.name,
    c.type,
    formatCount(c.count),
    formatCount(c.missing),
    (c.approximate ? '~' : '') + formatCount(c.distinct),
    formatMinMax(c.min),
    formatMinMax(c.max),
    c.mean === null ? '-' : formatNumber(c.mean),
    c.sd === null ? '-' : formatNumber(c.sd),
    formatTop(c),
  ]);
  out.push(
    ...renderTable(
      ['column', 'type', 'count', 'missing', 'distinct', 'min', 'max', 'mean', 'sd', 'top values'],
      rows,
      [24, 8, 14, 14, 14, 22, 22, 12, 12, 48],
      [false, false, true, true, true, false, false, true, true, false],
    ),
  );
  if (p.strata) {
    for (const col of p.strata.byColumn) {
      out.push('');
      out.push(...renderClasses(`Class balance of ${col.column} (${col.values.length} class${col.values.length === 1 ? '' : 'es'}):`, col.values));
    }
    if (p.strata.columns.length > 1) {
      out.push('');
      const smallest = p.strata.values.reduce((m, c, i) => (c.count < p.strata!.values[m]!.count ? i : m), 0);
      const s = p.strata.values[smallest];
      out.push(
        `Strata (${p.strata.columns.join(' × ')}): ${p.strata.values.length} combinations` +
          (s ? `; the smallest, ${describeClassValue(s, smallest)}, has ${formatCount(s.count)} record${s.count === 1 ? '' : 's'}.` : '.'),
      );
    }
  }
  if (p.warnings.length > 0) {
    out.push('');
    out.push('Warnings:');
    for (const w of p.warnings) out.push(`  ! ${showValue(w.message)}`);
  }
  if (p.rejects.length > 0) {
    out.push('');
    out.push(`Malformed records (first ${p.rejects.length}):`);
    for (const r of p.rejects) out.push(`  ${r.file}:${r.line}: ${r.code}${r.reason === null ? '' : `: ${showValue(r.reason)}`}`);
  }
  out.push('');
  out.push(p.excludeValues ? 'Data values were left out (--exclude-values): no min/max, frequent values or class names.' : DATA_VALUES_NOTE);
  return out;
}
