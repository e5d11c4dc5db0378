/**
 * What `shuffle` and `verify` print on a terminal once they are done: pure functions from the
 * manifest or the verify report (and the terminal's width) to lines of text, so they are tested
 * without a terminal.
 */
import type { Manifest } from '../engine/manifest.js';
import type { VerifyReport } from '../engine/verify.js';
import { countChecks, describeFiles, groupChecks } from '../report/checks.js';
import { formatCount, formatPercent, formatSignedPercent, plural } from '../report/format.js';
import { cutText as cut, padEnd, padStart, showValue as oneLine, widthOf } from './text.js';
import { buildReportModel, chooseClasses, chooseUnits, otherOf, type ReportModel, type UnitInfo } from '../report/model.js';

/** Rows of parts (and of folds) shown before the rest are summed up in one line. */
export const SUMMARY_ROWS = 12;

export interface SummaryOptions {
  /** The terminal's width in columns. */
  width: number;
  /** The output folder, as it is to be shown. */
  out: string;
  /** Where the report was written, or null. */
  report: string | null;
  /** Whether to print the table (a terminal), or the one line only. */
  table: boolean;
}

/** A signed deviation for the terminal: ASCII minus, so it lines up on any terminal font. */
function signed(d: number): string {
  return formatSignedPercent(d).replace('\u2212', '-');
}

/**
 * The first line: what went where, how long it took, the seed, what the dealing kept to (exact
 * quotas within --tolerance; whole groups; or, by key hash, nothing but the key) and, stratified,
 * the balance achieved.
 */
export function summaryHeadline(m: Manifest, out: string): string {
  const secs = (m.run.timingsMs.totalMs ?? 0) / 1000;
  const stratified = m.strata.columns.length > 0;
  const o = m.options as { assign?: string; group?: string | null };
  const tolerance = `within --tolerance ${m.balance.tolerance}`;
  const kept =
    o.assign === 'hash'
      ? `, parts by key hash${stratified ? ', class shares reported, not enforced' : ''}`
      : o.assign === 'group'
        ? `, whole groups of ${JSON.stringify(o.group ?? '')}${stratified ? `, classes ${tolerance}` : ''}`
        : stratified
          ? `, classes ${tolerance}`
          : '';
  return (
    `rowdeck: ${formatCount(m.input.records)} records -> ${m.output.parts.length} part(s) in ${out} ` +
    `(${secs.toFixed(1)} s, seed ${JSON.stringify(m.seed)}${m.seedIsDefault ? ' (the default: pass --seed to choose one)' : ''}` +
    `${m.input.rejected ? `, ${m.input.rejected} rejected record(s)` : ''}${kept}` +
    `${stratified ? `: max class deviation ${formatPercent(m.balance.maxDeviation, 2)}` : ''}).`
  );
}

/**
 * Where sizes are not dealt exactly (whole groups, key hash): the part and fold sizes achieved
 * against their targets, one line; null where every size is exact.
 */
export function summarySizes(m: Manifest): string | null {
  const o = m.options as { assign?: string; split?: { name: string; weight: number }[] | null; partitions?: number; folds?: number };
  if (o.assign !== 'hash' && o.assign !== 'group') return null;
  const P = o.partitions ?? 1;
  const K = o.folds ?? 1;
  const splits = o.split ?? [{ name: '', weight: 1 }];
  const wsum = splits.reduce((a, s) => a + s.weight, 0);
  const splitOf = (p: { split: string | null }): number => Math.max(0, splits.findIndex((s) => s.name === (p.split ?? '')));
  const target = (p: { split: string | null }): number => (wsum > 0 ? (m.input.records * splits[splitOf(p)]!.weight) / wsum : 0);
  const range = (sizes: number[], targets: number[]): string => {
    const t = [...new Set(targets.map((x) => Math.round(x)))];
    const against = t.length === 1 ? `target ${formatCount(t[0]!)} each` : `targets ${formatCount(Math.min(...t))} to ${formatCount(Math.max(...t))}`;
    return `${formatCount(Math.min(...sizes))} to ${formatCount(Math.max(...sizes))} records (${against})`;
  };
  const parts = m.output.parts;
  let line = `rowdeck: part sizes ${range(parts.map((p) => p.records), parts.map((p) => target(p) / P))}`;
  if (K > 1 && parts.every((p) => p.folds)) {
    const folds: number[] = [];
    const targets: number[] = [];
    splits.forEach((s, i) => {
      for (let f = 0; f < K; f++) {
        folds.push(parts.filter((p) => splitOf(p) === i).reduce((a, p) => a + p.folds![f]!, 0));
        targets.push(target({ split: s.name === '' ? null : s.name }) / K);
      }
    });
    line += `; fold sizes ${range(folds, targets)}`;
  }
  return `${line}${o.assign === 'hash' ? ': what the key hash gives, not dealt exactly' : ': whole groups are dealt, so sizes follow them'}.`;
}

/**
 * The summary after a shuffle: the headline; on a terminal, a table of parts (and folds) ×
 * classes with each count and its share's deviation from the whole's, the largest marked with
 * `*` (classes past the width folded into "other", parts past SUMMARY_ROWS summed up); then where
 * the report is. Without stratification, the table gives sizes only: there is no class mix.
 */
export function formatShuffleSummary(m: Manifest, o: SummaryOptions): string[] {
  const lines = [summaryHeadline(m, o.out)];
  const sizes = summarySizes(m);
  if (sizes !== null) lines.push(sizes);
  if (o.table) {
    const model = buildReportModel(m);
    lines.push(...(model.stratified ? classTable(model, o.width) : sizeTable(model, o.width)));
  }
  if (o.report !== null) lines.push(`rowdeck: report: ${o.report}`);
  return lines;
}

/** Units to list, and a line for those left out. */
function pickRows(units: UnitInfo[], what: string, withDeviation: boolean): { shown: UnitInfo[]; rest: string | null } {
  const shown = chooseUnits(units, SUMMARY_ROWS);
  if (shown.length === units.length) return { shown, rest: null };
  const hidden = units.filter((u) => !shown.includes(u));
  const largest = Math.max(...hidden.map((u) => u.worst));
  const records = hidden.map((u) => u.records);
  return {
    shown,
    rest: withDeviation
      ? `… ${hidden.length} more ${what}s, every class within ${formatPercent(largest, 2)}`
      : `… ${hidden.length} more ${what}s of ${formatCount(Math.min(...records))} to ${formatCount(Math.max(...records))} records`,
  };
}

function classTable(model: ReportModel, width: number): string[] {
  const units = [...model.parts, ...model.folds];
  const labelW = Math.min(28, Math.max(11, ...units.map((u) => widthOf(u.label))));
  // A column: count, a space, a signed deviation with its mark ("-12.34%*").
  const countW = Math.max(5, ...model.classes.map((c) => formatCount(c.records).length));
  const cellW = countW + 1 + 8;
  const room = Math.max(1, Math.floor((width - labelW) / (cellW + 2)));
  const worst = model.worst;
  const { shown, other } = chooseClasses(model.classes, room, worst?.classIndex);
  const columns = shown.map((s) => ({ label: oneLine(model.classes[s]!.label), classes: [s] }));
  if (other.length > 0) columns.push({ label: `${other.length} other`, classes: other });
  const lines: string[] = [];
  lines.push(`class mix by ${model.classColumns}: records, then the share's deviation from the whole's${worst ? ' (* the largest)' : ''}:`);
  const row = (label: string, cells: string[]): string => `${padEnd(cut(oneLine(label), labelW), labelW)}${cells.map((c) => `  ${c}`).join('')}`.trimEnd();
  lines.push(row('', columns.map((c) => padEnd(cut(c.label, cellW), cellW))));
  const wholeCells = columns.map((c) => {
    const n = c.classes.reduce((a, s) => a + model.classes[s]!.records, 0);
    return `${padStart(formatCount(n), countW)} ${padEnd(formatPercent(model.total > 0 ? n / model.total : 0), 8)}`;
  });
  lines.push(row('whole input', wholeCells));
  const unitRow = (u: UnitInfo): string =>
    row(
      u.label,
      columns.map((c) => {
        const single = c.classes.length === 1;
        const n = single ? u.strata[c.classes[0]!]! : otherOf(u, c.classes, model.classes, model.total).records;
        const d = single ? u.deviation[c.classes[0]!]! : otherOf(u, c.classes, model.classes, model.total).deviation;
        const mark = worst && worst.unit === u && c.classes.includes(worst.classIndex) && single ? '*' : '';
        return `${padStart(formatCount(n), countW)} ${padEnd(signed(d) + mark, 8)}`;
      }),
    );
  for (const [list, what] of [
    [model.parts, 'part'],
    [model.folds, 'fold'],
  ] as const) {
    if (list.length === 0) continue;
    const { shown: rows, rest } = pickRows(list, what, true);
    for (const u of rows) lines.push(unitRow(u));
    if (rest) lines.push(rest);
  }
  if (other.length > 0) lines.push(`(${plural(other.length, 'smaller class', 'smaller classes')} as "other"; all are in the manifest)`);
  if (worst) lines.push(`largest deviation: ${signed(worst.unit.deviation[worst.classIndex]!)}, ${oneLine(model.classes[worst.classIndex]!.label)} in ${worst.unit.label}`);
  else lines.push('every class has exactly its overall share in every part.');
  return lines.map((l) => cut(l, width));
}

function sizeTable(model: ReportModel, width: number): string[] {
  const lines = ['not stratified: sizes only (pass --stratify COL to keep a class mix)'];
  const units = [...model.parts, ...model.folds];
  const labelW = Math.min(Math.max(20, width - 24), Math.max(4, ...units.map((u) => widthOf(u.label))));
  const countW = Math.max(7, ...units.map((u) => formatCount(u.records).length));
  lines.push(`${padEnd('', labelW)}  ${padStart('records', countW)}  share`);
  for (const [list, what] of [
    [model.parts, 'part'],
    [model.folds, 'fold'],
  ] as const) {
    if (list.length === 0) continue;
    const { shown, rest } = pickRows(list, what, false);
    for (const u of shown) lines.push(`${padEnd(cut(u.label, labelW), labelW)}  ${padStart(formatCount(u.records), countW)}  ${formatPercent(model.total > 0 ? u.records / (u.kind === 'fold' ? foldTotal(model, u) : model.total) : 0)}`);
    if (rest) lines.push(rest);
  }
  return lines;
}

function foldTotal(model: ReportModel, u: UnitInfo): number {
  return model.folds.filter((f) => f.split === u.split).reduce((a, f) => a + f.records, 0);
}

/**
 * Which checks ran on which files: checks with the same outcome on the same files share a line
 * ("passed  bytes, sha256, records, … on part-00000.csv, …, part-00003.csv (4 files)"), then the
 * notes of skipped and failed checks.
 */
export function formatVerifyChecks(r: VerifyReport, width: number): string[] {
  const lines: string[] = [];
  const byFiles = new Map<string, { status: string; checks: string[]; files: string[]; notes: string[] }>();
  for (const g of groupChecks(r.checks)) {
    const id = `${g.status}\u0000${g.files.join('\u0000')}`;
    const entry = byFiles.get(id) ?? { status: g.status, checks: [], files: g.files, notes: [] };
    entry.checks.push(g.check);
    for (const n of g.notes) if (!entry.notes.includes(n)) entry.notes.push(n);
    byFiles.set(id, entry);
  }
  const n = countChecks(r);
  lines.push(`checks: ${n.passed} passed, ${n.failed} failed, ${n.skipped} skipped:`);
  for (const e of byFiles.values()) {
    const files = e.files.length === 1 ? e.files[0]! : describeFiles(e.files);
    const text = `  ${padEnd(e.status, 7)}  ${e.checks.join(', ')}  on ${files}`;
    lines.push(widthOf(text) <= width ? text : `  ${padEnd(e.status, 7)}  ${e.checks.join(', ')}\n  ${' '.repeat(7)}  on ${files}`);
    for (const note of e.notes) lines.push(`  ${' '.repeat(7)}  (${oneLine(note)})`);
  }
  return lines.flatMap((l) => l.split('\n'));
}
