/**
 * The shuffle report: a manifest (and, when given, a verify report) as one HTML page. Pure: the
 * same manifest gives the same page.
 *
 * Every figure on the page is marked so a test can read it back and compare it with the manifest:
 * an element with `data-k="KEY1 KEY2"` shows the figures KEY1, KEY2 as the first numbers of its
 * text; `data-s="KEY"` shows the text KEY whole, `data-t="KEY"` its beginning (cut short, the
 * whole in a title). Keys name what they show: `input.records`, `part.3.records`,
 * `part.3.class.2` (records of class 2 in part 3), `part.3.class.4,7` (classes 4 and 7 together),
 * `part.3.cshare.2` (that count over the part's records), `part.3.dev.2` (the signed deviation
 * of that share from the overall share), `fold.0.2.…` (fold 2 of split 0), `whole.…` (the whole
 * input), `class.2.name`, `option.folds`, … (test/report.keys.ts resolves them all).
 */
import type { Manifest, PartRecord } from '../engine/manifest.js';
import type { VerifyReport } from '../engine/verify.js';
import type { ColumnSummary } from '../core/stats.js';
import type { BinEdges } from '../engine/quantiles.js';
import { countChecks, groupChecks } from './checks.js';
import { escapeText } from './escape.js';
import { formatCount, formatNumber, formatPercent, formatSignedPercent, plural } from './format.js';
import { buildReportModel, chooseClasses, chooseUnits, otherOf, type ReportModel, type UnitInfo } from './model.js';
import { deviationGrid, deviationLegend, listKey, mixChart, sizeChart, spreadChart, toleranceMeter, type ClassColumn, type GridRow, type MixRow, type SpreadRow } from './charts.js';
import { renderPage } from './page.js';
import { PATTERN_NAMES, SLOTS, swatch, tag } from './svg.js';

export interface ManifestReportOptions {
  /** The output folder's name, shown in the heading (the manifest does not hold it). */
  folder?: string;
  /** The result of verify() on the folder, shown in full; without it the page says it was not checked. */
  verify?: VerifyReport | null;
}

/** Units drawn one by one in a chart; more are shown in the tables only. */
export const CHART_UNITS = 64;
/** Class columns in the deviation grid before the smallest are folded into "other classes". */
export const GRID_CLASSES = 40;
/** Mismatches listed on the page (all are counted). */
export const LISTED_MISMATCHES = 200;

// --- small markup helpers ----------------------------------------------------------------------------

/** A figure: `text` shows the figures named by `keys`, in order. */
export function fig(keys: string, text: string, name = 'span', attrs: Record<string, string> = {}): string {
  return tag(name, { ...attrs, 'data-k': keys }, escapeText(text));
}

/** A text from the data, shown whole. */
export function txt(key: string, s: string, name = 'span', attrs: Record<string, string> = {}): string {
  return tag(name, { ...attrs, 'data-s': key }, escapeText(s));
}

/** A generic label that holds digits of our own (a column heading such as "sha256"). */
export function lbl(s: string): string {
  return `<span class="lbl">${escapeText(s)}</span>`;
}

/** A section; `title` and `lead` are markup (escape any data in them). */
export function section(id: string, title: string, lead: string, body: string): string {
  return `<section id="${id}">\n<h2>${title}</h2>\n${lead ? `<p class="lead">${lead}</p>\n` : ''}${body}\n</section>`;
}

/**
 * A table; long ones scroll in a box (unrolled on paper). Cells are markup; `n` marks numeric
 * columns, `clip` columns whose long text is cut with … on screen (the whole text stays in the page).
 */
export function table(caption: string, head: { label: string; n?: boolean; clip?: boolean }[], rows: { cells: string[]; cls?: string; hot?: number[] }[]): string {
  const th = head.map((h) => `<th scope="col"${h.n ? ' class="n"' : ''}>${h.label}</th>`).join('');
  const body = rows
    .map((r) => {
      const cells = r.cells.map((c, i) => {
        const cls = [head[i]?.n ? 'n' : '', head[i]?.clip ? 'clip' : '', r.hot?.includes(i) ? 'hot' : ''].filter(Boolean).join(' ');
        return i === 0 ? `<th scope="row"${cls ? ` class="${cls}"` : ''}>${c}</th>` : `<td${cls ? ` class="${cls}"` : ''}>${c}</td>`;
      });
      return `<tr${r.cls ? ` class="${r.cls}"` : ''}>${cells.join('')}</tr>`;
    })
    .join('\n');
  const t = `<table>\n<caption class="note">${escapeText(caption)}</caption>\n<thead><tr>${th}</tr></thead>\n<tbody>\n${body}\n</tbody></table>`;
  return rows.length > 14 || head.length > 10 ? `<div class="scroll" tabindex="0" role="region" aria-label="${escapeText(caption)}">${t}</div>` : `<div class="plain">${t}</div>`;
}

function fact(title: string, body: string): string {
  return `<div class="fact"><dt>${escapeText(title)}</dt><dd>${body}</dd></div>`;
}

// --- the report ----------------------------------------------------------------------------------

export function renderManifestReport(m: Manifest, options: ManifestReportOptions = {}): string {
  const model = buildReportModel(m);
  const verify = options.verify ?? null;
  const folder = options.folder ?? null;
  const body: string[] = [];
  const what = folder === null ? 'Shuffle report' : 'Shuffle report: ';
  body.push(
    `<header class="top"><h1><span class="what">${what}</span>${folder !== null ? txt('folder', folder) : ''}</h1>` +
      `<p>${fig('input.records', formatCount(m.input.records))} records from ${fig('inputs.count', plural(m.input.files.length, 'input'))}, dealt into ${fig('parts.count', plural(m.output.parts.length, 'part'))}` +
      `${model.folds.length > 0 ? ` with ${fig('option.folds', plural(m.options.folds as number, 'fold'))}` : ''}. Written ${txt('run.createdAt', m.run.createdAt)} by rowdeck ${txt('tool.version', m.tool.version)}.</p></header>`,
  );
  body.push(renderFacts(m, model, verify));
  if (model.stratified) {
    body.push(renderMix(m, model));
    body.push(renderDeviations(m, model));
  } else {
    body.push(section('classes', 'Class mix', '', `<p>This run was not stratified (no <code>--stratify</code>), so there are no classes to compare: records were dealt without regard to their values.</p>`));
  }
  body.push(renderSizes(m, model));
  if (model.splits.length > 0) body.push(renderSplits(m, model));
  if (m.options.group !== null && m.options.group !== undefined) body.push(renderGroups(m, model));
  if (m.strata.bins.length > 0) body.push(renderBins(m.strata.bins, 'bins'));
  if (m.input.stats !== undefined) body.push(renderStats(m, model));
  body.push(renderRun(m));
  body.push(renderVerify(verify, m));
  body.push(
    `<footer>Made by rowdeck ${txt('tool.version', m.tool.version)} from <code>manifest.json</code>. This page runs no script and loads nothing: keep it with the parts, or print it.${m.options.excludeValues ? ' The manifest was written with <code>--exclude-values</code>: classes are numbered, not named.' : ''}</footer>`,
  );
  const title = `rowdeck shuffle report${folder !== null ? `: ${folder}` : ''}`;
  return renderPage(title, `rowdeck ${m.tool.version}`, body.join('\n'));
}

function renderFacts(m: Manifest, model: ReportModel, verify: VerifyReport | null): string {
  const facts: string[] = [];
  const same = m.input.fingerprint === m.output.fingerprint && m.input.records === m.output.records;
  facts.push(
    fact(
      'Records',
      `<span class="big">${fig('input.records', formatCount(m.input.records))}</span><br><span class="small">read; ${fig('output.records', formatCount(m.output.records))} written${m.input.rejected > 0 ? `, ${fig('input.rejected', formatCount(m.input.rejected))} rejected` : ''}. ` +
        (same ? '<span class="ok">Input and output fingerprints agree.</span>' : '<span class="fail">Input and output fingerprints differ.</span>') +
        '</span>',
    ),
  );
  const shape = [
    model.splits.length > 0 ? `${fig('splits.count', plural(model.splits.length, 'split'))}` : '',
    model.folds.length > 0 ? `${fig('option.folds', plural(m.options.folds as number, 'fold'))} in each` : '',
  ].filter(Boolean);
  facts.push(fact('Parts', `<span class="big">${fig('parts.count', formatCount(m.output.parts.length))}</span><br><span class="small">${shape.length ? shape.join(', ') : 'files of records'}</span>`));
  if (model.stratified) {
    const worst = m.balance.worst;
    const where = worst ? ` (${txt('worst.class', model.classes[worst.stratum]?.label ?? '')} in ${txt('worst.unit', worst.unit)})` : '';
    facts.push(
      fact(
        'Class balance',
        `<span class="big">${fig('balance.maxDeviation', formatPercent(m.balance.maxDeviation, 2))}</span><br>` +
          `<span class="small">largest deviation${where}, within the tolerance of ${fig('balance.tolerance', formatPercent(m.balance.tolerance, 2))}</span>` +
          toleranceMeter('meter', m.balance.maxDeviation, m.balance.tolerance),
      ),
    );
  } else {
    facts.push(fact('Class balance', '<span class="big">—</span><br><span class="small">not stratified</span>'));
  }
  if (verify) {
    const n = countChecks(verify);
    facts.push(
      fact(
        'Verified',
        verify.ok
          ? `<span class="big ok">passed</span><br><span class="small">${fig('verify.passed', formatCount(n.passed))} checks passed${n.skipped ? `, ${fig('verify.skipped', formatCount(n.skipped))} skipped` : ''}</span>`
          : `<span class="big fail">failed</span><br><span class="small">${fig('verify.mismatches', plural(verify.mismatches.length, 'mismatch', 'mismatches'))}; ${fig('verify.failed', formatCount(n.failed))} checks failed</span>`,
      ),
    );
  } else {
    facts.push(fact('Verified', '<span class="big none">not checked</span><br><span class="small">run <code>rowdeck report DIR --verify</code> to re-read the parts</span>'));
  }
  facts.push(fact('Seed', `<span class="mono">${txt('seed', m.seed ?? '')}</span><br><span class="small">${m.seedIsDefault ? 'the default seed (no <code>--seed</code> given)' : 'same seed, inputs and options: same bytes'}</span>`));
  return `<dl class="facts">${facts.join('')}</dl>`;
}

// --- class mix -------------------------------------------------------------------------------------

function classColumns(model: ReportModel, room: number): { columns: ClassColumn[]; other: number[] } {
  const { shown, other } = chooseClasses(model.classes, room, model.worst?.classIndex);
  const columns: ClassColumn[] = shown.map((s, k) => ({ classes: [s], label: model.classes[s]!.label, labelKey: `class.${s}.name`, slot: k % SLOTS }));
  if (other.length > 0) columns.push({ classes: other, label: `other classes`, labelKey: null, slot: SLOTS });
  return { columns, other };
}

function countsOf(u: { strata: number[] }, columns: ClassColumn[]): number[] {
  return columns.map((c) => c.classes.reduce((a, s) => a + u.strata[s]!, 0));
}

function legend(model: ReportModel, columns: ClassColumn[]): string {
  const items = columns.map((c) => {
    const share = c.classes.reduce((a, s) => a + model.classes[s]!.share, 0);
    const name = c.labelKey ? txt(c.labelKey, c.label) : `other classes (${fig(`class.${listKey(c.classes)}.count`, formatCount(c.classes.length))} together)`;
    return `<li>${swatch(c.slot)}<span>${name} ${fig(`whole.cshare.${listKey(c.classes)}`, formatPercent(share))}</span> <span class="pat">${escapeText(PATTERN_NAMES[c.slot] ?? '')}</span></li>`;
  });
  return `<ul class="legend" aria-label="Classes: colour and pattern">${items.join('')}</ul>`;
}

function wholeUnit(m: Manifest, model: ReportModel): MixRow & { strata: number[] } {
  return { key: 'whole', label: 'whole input', labelIsData: false, records: model.total, counts: [], strata: m.strata.values.map((v) => v.records) };
}

function renderMix(m: Manifest, model: ReportModel): string {
  const { columns, other } = classColumns(model, SLOTS);
  const whole = wholeUnit(m, model);
  const rowsOf = (units: UnitInfo[]): MixRow[] => [
    { ...whole, counts: countsOf(whole, columns) },
    ...chooseUnits(units, CHART_UNITS).map((u) => ({ key: u.key, label: u.label, labelIsData: true, records: u.records, counts: countsOf(u, columns) })),
  ];
  const figures: string[] = [];
  const folded = other.length > 0 ? ` The largest classes have their own colour; the others share the grey cross-hatch.` : '';
  const cut = (units: UnitInfo[]): string => (units.length > CHART_UNITS ? ` Only the ${units[0]!.kind}s whose mix strays most are drawn; the table under the deviations lists every one.` : '');
  figures.push(
    `<figure>${mixChart('mix-parts', rowsOf(model.parts), columns, `Class mix of each part against the whole input`, `One bar per part, split by class; the dashed lines continue the whole input's class boundaries.`)}` +
      `<figcaption>Each bar is one part, divided by class. Dashed lines continue the whole input's boundaries: a part whose edges sit on them has the whole's mix.${folded}${cut(model.parts)}</figcaption></figure>`,
  );
  if (model.folds.length > 0) {
    figures.push(
      `<figure>${mixChart('mix-folds', rowsOf(model.folds), columns, `Class mix of each fold against the whole input`, `One bar per fold (its records in all parts), split by class.`)}` +
        `<figcaption>The same for each fold, over all the parts of its split.${cut(model.folds)}</figcaption></figure>`,
    );
  }
  return section(
    'classes',
    `Class mix by ${txt('strata.columns', model.classColumns)}`,
    `Every part should hold each class of <strong>${txt('strata.columns', model.classColumns)}</strong> at its share of the whole input. ${fig('classes.count', plural(model.classes.length, 'class', 'classes'))} in all.`,
    legend(model, columns) + figures.join('\n'),
  );
}

/** Every unit's records per class and their deviations: the numbers behind both charts. */
function countsTable(model: ReportModel): string {
  const head = [{ label: 'unit' }, { label: 'records', n: true }, ...model.classes.map((c) => ({ label: txt(`class.${c.index}.name`, c.label), n: true }))];
  const worst = model.worst;
  const row = (u: UnitInfo): { cells: string[]; hot?: number[] } => ({
    cells: [
      txt(`${u.key}.name`, u.label),
      fig(`${u.key}.records`, formatCount(u.records)),
      ...u.strata.map((n, s) => `${fig(`${u.key}.class.${s}`, formatCount(n))} <span class="dv">${fig(`${u.key}.dev.${s}`, formatSignedPercent(u.deviation[s]!))}</span>`),
    ],
    ...(worst && worst.unit === u ? { hot: [2 + worst.classIndex] } : {}),
  });
  const rows = [
    {
      cells: ['whole input', fig('whole.records', formatCount(model.total)), ...model.classes.map((c) => `${fig(`whole.class.${c.index}`, formatCount(c.records))} <span class="dv">${fig(`whole.cshare.${c.index}`, formatPercent(c.share))}</span>`)],
      cls: 'whole',
    },
    ...model.parts.map(row),
    ...model.folds.map(row),
  ];
  return table(`Records per class in each unit, then the deviation of the class's share from its share in the whole input (the whole's row gives the share).`, head, rows);
}

// --- deviations --------------------------------------------------------------------------------------

function gridRows(units: UnitInfo[], columns: ClassColumn[], model: ReportModel): GridRow[] {
  return units.map((u) => ({
    key: u.key,
    label: u.label,
    records: u.records,
    cells: columns.map((c) => (c.classes.length === 1 ? { count: u.strata[c.classes[0]!]!, deviation: u.deviation[c.classes[0]!]! } : (({ records, deviation }) => ({ count: records, deviation }))(otherOf(u, c.classes, model.classes, model.total)))),
  }));
}

function renderDeviations(m: Manifest, model: ReportModel): string {
  const { columns } = classColumns(model, GRID_CLASSES);
  const range = model.worst?.deviation ?? 0;
  const tol = m.balance.tolerance;
  const figures: string[] = [deviationLegend('dev-legend', range, tol)];
  const draw = (id: string, units: UnitInfo[], what: string): void => {
    const shown = chooseUnits(units, CHART_UNITS);
    const rows = gridRows(shown, columns, model);
    let worst: { row: string; column: number } | null = null;
    if (model.worst) {
      const col = columns.findIndex((c) => c.classes.includes(model.worst!.classIndex));
      if (col >= 0 && shown.includes(model.worst.unit)) worst = { row: model.worst.unit.key, column: col };
    }
    figures.push(
      `<figure>${deviationGrid(id, rows, columns, range, tol, worst, `Deviation of each class's share in each ${what} from its overall share`, `Rows are ${what}s, columns classes; blue cells hold less of the class than the whole input, orange cells more.`)}` +
        `<figcaption>${units.length > CHART_UNITS ? `The ${what}s whose mix strays most; the table below lists every one. ` : ''}Hover a cell for its figures.</figcaption></figure>`,
    );
  };
  draw('dev-parts', model.parts, 'part');
  if (model.folds.length > 0) draw('dev-folds', model.folds, 'fold');
  const w = model.worst;
  const lead = w
    ? `How far each class's share in a part or fold strays from its share in the whole input, relative to that share. The largest, ${fig('worst.deviation', formatSignedPercent(w.unit.deviation[w.classIndex]!))}, is ${txt(`class.${w.classIndex}.name`, model.classes[w.classIndex]!.label)} in ${txt(`${w.unit.key}.name`, w.unit.label)} (outlined in black).`
    : 'Every class has exactly its overall share in every part and fold.';
  return section('deviations', 'Deviation from the overall share', lead, figures.join('\n') + countsTable(model));
}

// --- sizes ------------------------------------------------------------------------------------------

function renderSizes(m: Manifest, model: ReportModel): string {
  const bySplit = new Map<string | null, PartRecord[]>();
  for (const p of m.output.parts) bySplit.set(p.split, [...(bySplit.get(p.split) ?? []), p]);
  const meanOf = (split: string | null): number => {
    const ps = bySplit.get(split)!;
    return ps.reduce((a, p) => a + p.records, 0) / ps.length;
  };
  const shown = chooseUnits(model.parts, CHART_UNITS);
  const chartRows = shown.map((u) => ({ key: u.key, label: u.label, records: u.records, mean: meanOf(u.split) }));
  // Parts dealt by rank differ by one record at most: a chart of equal bars says nothing.
  const spread = [...bySplit.values()].some((ps) => Math.max(...ps.map((p) => p.records)) - Math.min(...ps.map((p) => p.records)) > 1);
  const drawSizes = spread || model.splits.length > 0;
  const K = model.folds.length > 0 ? (m.options.folds as number) : 0;
  const head = [
    { label: 'part' },
    ...(model.splits.length > 0 ? [{ label: 'split' }] : []),
    { label: 'records', n: true },
    { label: 'share of all', n: true },
    { label: 'bytes', n: true },
    ...Array.from({ length: K }, (_, k) => ({ label: `fold ${fig(`fold.label.${k}`, String(k))}`, n: true })),
  ];
  const rows = m.output.parts.map((p, i) => ({
    cells: [
      txt(`part.${i}.name`, p.path),
      ...(model.splits.length > 0 ? [txt(`part.${i}.split`, p.split ?? '')] : []),
      fig(`part.${i}.records`, formatCount(p.records)),
      fig(`part.${i}.share`, formatPercent(model.total > 0 ? p.records / model.total : 0, 2)),
      fig(`part.${i}.bytes`, formatCount(p.bytes)),
      ...(p.folds ?? []).map((n, k) => fig(`part.${i}.fold.${k}`, formatCount(n))),
    ],
  }));
  let folds = '';
  if (model.folds.length > 0) {
    folds = table(
      'Records per fold, over all the parts of its split.',
      [{ label: 'fold' }, { label: 'records', n: true }, { label: 'share of its split', n: true }],
      model.folds.map((u) => {
        const splitTotal = model.folds.filter((f) => f.split === u.split).reduce((a, f) => a + f.records, 0);
        return { cells: [txt(`${u.key}.name`, u.label), fig(`${u.key}.records`, formatCount(u.records)), fig(`${u.key}.splitshare`, formatPercent(splitTotal > 0 ? u.records / splitTotal : 0, 2))] };
      }),
    );
  }
  const empty = m.output.parts.filter((p) => p.records === 0).length;
  const warn = empty > 0 ? `<p class="fail">${fig('parts.empty', plural(empty, 'part is', 'parts are'))} empty: there were fewer groups or records than parts.</p>` : '';
  return section(
    'sizes',
    'Part and fold sizes',
    drawSizes ? `Records in each part; the tick on each bar marks the mean size of the parts of its ${model.splits.length > 0 ? 'split' : 'output'}.` : '',
    warn +
      (drawSizes
        ? `<figure>${sizeChart('sizes', chartRows, 'Records per part', 'One bar per part; a tick marks the mean part size.')}${shown.length < model.parts.length ? '<figcaption>The parts furthest from an even mix are drawn; the table lists every one.</figcaption>' : ''}</figure>`
        : `<p>Every part holds ${fig('parts.minRecords', formatCount(Math.min(...m.output.parts.map((p) => p.records))))} to ${fig('parts.maxRecords', formatCount(Math.max(...m.output.parts.map((p) => p.records))))} records: dealt by rank, parts differ by one record at most.</p>`) +
      table('Every part: records, its share of all records, its size on disk, and its records per fold.', head, rows) +
      folds,
  );
}

function renderSplits(m: Manifest, model: ReportModel): string {
  const splits = (m.options.split as { name: string; weight: number }[]) ?? [];
  const sum = splits.reduce((a, s) => a + s.weight, 0);
  const counts = m.options.splitWeightsAreCounts === true;
  const rows = splits.map((s, i) => {
    const records = m.output.parts.filter((p) => p.split === s.name).reduce((a, p) => a + p.records, 0);
    return {
      cells: [
        txt(`split.${i}.name`, s.name),
        counts ? fig(`split.${i}.weight`, formatCount(s.weight)) : fig(`split.${i}.weight`, formatNumber(s.weight)),
        fig(`split.${i}.asked`, formatPercent(sum > 0 ? s.weight / sum : 0, 2)),
        fig(`split.${i}.records`, formatCount(records)),
        fig(`split.${i}.share`, formatPercent(model.total > 0 ? records / model.total : 0, 2)),
      ],
    };
  });
  return section(
    'splits',
    'Splits',
    counts ? 'Split sizes were given as record counts.' : 'Split sizes were given as weights; each split gets its weight over the sum of the weights.',
    table('Each split: what was asked, and what it holds.', [{ label: 'split' }, { label: counts ? 'records asked' : 'weight', n: true }, { label: 'asked share', n: true }, { label: 'records', n: true }, { label: 'share', n: true }], rows),
  );
}

function renderGroups(m: Manifest, model: ReportModel): string {
  const sizes = m.output.parts.map((p) => p.records);
  const lead =
    `Records with the same value of ${txt('group.column', String(m.options.group))} were kept in one part: whole groups were placed, largest first, ` +
    `each where its classes were most wanted. Parts then differ in size as the groups do: the smallest holds ${fig('parts.minRecords', formatCount(Math.min(...sizes)))} records, the largest ${fig('parts.maxRecords', formatCount(Math.max(...sizes)))}.`;
  const balance = model.stratified
    ? `<p>The class balance this achieved: a largest deviation of ${fig('balance.maxDeviation', formatPercent(m.balance.maxDeviation, 2))}, against the tolerance of ${fig('balance.tolerance', formatPercent(m.balance.tolerance, 2))}.</p>`
    : '<p>Without <code>--stratify</code>, groups were placed to even out the part sizes only.</p>';
  return section('groups', 'Groups', lead, balance);
}

export function renderBins(bins: BinEdges[], prefix: string): string {
  const blocks = bins.map((b, i) => {
    const edges = b.edges.length === 0 ? '<span class="note">left out (<code>--exclude-values</code>)</span>' : b.edges.map((e, j) => fig(`${prefix}.${i}.edge.${j}`, formatNumber(e), 'code')).join(', ');
    return (
      `<h3>${txt(`${prefix}.${i}.column`, b.column)}</h3><p>${fig(`${prefix}.${i}.bins`, plural(b.bins, 'bin'))} from ${fig(`${prefix}.${i}.values`, formatCount(b.values))} values` +
      `${b.missing > 0 ? ` (${fig(`${prefix}.${i}.missing`, formatCount(b.missing))} missing, a class of their own)` : ''}; ${b.exact ? 'exact quantiles' : 'quantiles of a uniform sample (the column did not fit the memory budget)'}. Edges: ${edges}. A value v falls in the bin after the last edge ≤ v.</p>`
    );
  });
  return section('bins', 'Quantile bins', 'Numeric stratify columns given as <code>COL:bins=Q</code> were cut at these edges into classes of about equal size.', blocks.join('\n'));
}

// --- statistics --------------------------------------------------------------------------------------

function minMax(key: string, v: number | string | null): string {
  if (v === null) return '—';
  return typeof v === 'number' ? fig(key, formatNumber(v)) : txt(key, v, 'span', { class: 'mono' });
}

export function columnTable(caption: string, cols: ColumnSummary[], prefix: string): string {
  return table(
    caption,
    [{ label: 'column' }, { label: 'type' }, { label: 'values', n: true }, { label: 'missing', n: true }, { label: 'distinct', n: true }, { label: 'min', clip: true }, { label: 'max', clip: true }, { label: 'mean', n: true }, { label: 'sd', n: true }],
    cols.map((c, i) => ({
      cells: [
        txt(`${prefix}.${i}.name`, c.name),
        escapeText(c.type),
        fig(`${prefix}.${i}.count`, formatCount(c.count)),
        fig(`${prefix}.${i}.missing`, formatCount(c.missing)),
        `${c.approximate ? '~' : ''}${fig(`${prefix}.${i}.distinct`, formatCount(c.distinct))}`,
        minMax(`${prefix}.${i}.min`, c.min),
        minMax(`${prefix}.${i}.max`, c.max),
        c.mean === null ? '—' : fig(`${prefix}.${i}.mean`, formatNumber(c.mean)),
        c.sd === null ? '—' : fig(`${prefix}.${i}.sd`, formatNumber(c.sd)),
      ],
    })),
  );
}

function renderStats(m: Manifest, model: ReportModel): string {
  const whole = m.input.stats as ColumnSummary[];
  const partStats = m.output.parts.map((p) => (p.stats as ColumnSummary[] | undefined) ?? []);
  const blocks: string[] = [columnTable('Every column of the whole input.', whole, 'whole.col')];
  whole.forEach((c, ci) => {
    if ((c.type !== 'integer' && c.type !== 'number') || c.mean === null) return;
    const drawn = c.sd !== null && c.sd > 0;
    // Units ranked by how far their mean is from the whole's, in the whole's standard deviations.
    const off = (u: UnitInfo): number => {
      const s = partStats[u.index]?.[ci];
      return s?.mean == null ? 0 : Math.abs(s.mean - c.mean!) / (c.sd || 1);
    };
    const ranked = model.parts.map((u) => ({ ...u, worst: off(u) }));
    const shown = chooseUnits(ranked, CHART_UNITS);
    const rows: SpreadRow[] = [
      { key: 'whole', label: 'whole input', labelIsData: false, mean: c.mean, sd: c.sd },
      ...shown.map((u) => ({ key: u.key, label: u.label, labelIsData: true, mean: partStats[u.index]?.[ci]?.mean ?? null, sd: partStats[u.index]?.[ci]?.sd ?? null })),
    ];
    const t = table(
      'Every part: its values, missing values, mean and standard deviation.',
      [{ label: 'part' }, { label: 'values', n: true }, { label: 'missing', n: true }, { label: 'mean', n: true }, { label: 'sd', n: true }],
      model.parts.map((u) => {
        const s = partStats[u.index]?.[ci];
        return {
          cells: [
            txt(`${u.key}.name`, u.label),
            s ? fig(`${u.key}.stat.${ci}.count`, formatCount(s.count)) : '—',
            s ? fig(`${u.key}.stat.${ci}.missing`, formatCount(s.missing)) : '—',
            s?.mean != null ? fig(`${u.key}.stat.${ci}.mean`, formatNumber(s.mean)) : '—',
            s?.sd != null ? fig(`${u.key}.stat.${ci}.sd`, formatNumber(s.sd)) : '—',
          ],
        };
      }),
    );
    blocks.push(
      `<h3>${txt(`whole.col.${ci}.name`, c.name)}</h3>` +
        (drawn
          ? `<figure>${spreadChart(`spread-${ci}`, ci, rows, `Mean and spread in each part against the whole input`, `Left: how far each part's mean is from the whole input's, in the whole's standard deviations. Right: each part's standard deviation over the whole's. The whole input sits on the dashed lines.`)}` +
            `<figcaption>Left: each part's mean, off the whole input's mean, in the whole's standard deviations (sd). Right: each part's sd against the whole's. Dots on the dashed lines match the whole.${shown.length < model.parts.length ? ' The parts whose mean is furthest from the whole are drawn.' : ''}</figcaption></figure>`
          : '') +
        t,
    );
  });
  return section('stats', 'Column statistics', 'From <code>--stats</code>: the whole input\'s columns, then for each numeric column its mean and spread in every part against the whole.', blocks.join('\n'));
}

// --- run, inputs, checksums ---------------------------------------------------------------------------

function renderRun(m: Manifest): string {
  const options =
    `<h3>Options</h3><p class="note">The options that decide the output, as the manifest records them (JSON).</p><dl class="opts">` +
    Object.entries(m.options)
      .map(([k, v]) => `<div><dt>${escapeText(k)}</dt><dd>${txt(`option.${k}`, JSON.stringify(v), 'code')}</dd></div>`)
      .join('') +
    '</dl>';
  const inputs = table(
    'Inputs, in the order given.',
    [{ label: 'input' }, { label: 'bytes read', n: true }, { label: 'records', n: true }, { label: 'rejected', n: true }],
    m.input.files.map((f, i) => ({
      cells: [txt(`input.${i}.path`, f.path, 'span', { class: 'mono' }), fig(`input.${i}.bytes`, formatCount(f.bytes)), fig(`input.${i}.records`, formatCount(f.records)), fig(`input.${i}.rejected`, formatCount(f.rejected))],
    })),
  );
  const sums = table(
    'Checksums of every part: of the file as written, and the fingerprint of its records.',
    [{ label: 'part' }, { label: lbl('sha256') }, { label: 'fingerprint' }],
    m.output.parts.map((p, i) => ({ cells: [txt(`part.${i}.name`, p.path), txt(`part.${i}.sha256`, p.sha256, 'code'), txt(`part.${i}.fingerprint`, p.fingerprint, 'code')] })),
  );
  const fp =
    `<p>Fingerprint of the input's records ${txt('fingerprint.in', m.input.fingerprint, 'code')}, of the output's ${txt('fingerprint.out', m.output.fingerprint, 'code')}: ` +
    `${m.input.fingerprint === m.output.fingerprint ? '<span class="ok">the same</span>' : '<span class="fail">different</span>'}. A fingerprint is a sum over the records, so it does not depend on their order; one record lost, doubled or changed changes it.` +
    `${m.input.rejectsFile ? ` Rejected records are in ${txt('input.rejectsFile', m.input.rejectsFile, 'code')}.` : ''}</p>`;
  const seed = `<p>Seed ${txt('seed', m.seed ?? '', 'code')}${m.seedIsDefault ? ' (the default: no <code>--seed</code> was given)' : ''}. Worker threads: ${fig('run.threads', formatCount(m.run.threads))}; spill buckets: ${fig('run.buckets', formatCount(m.run.buckets))}. Neither changes the output.</p>`;
  return section('run', 'Run, inputs and checksums', 'Everything needed to make the same output again, and to check a copy of it.', seed + options + inputs + fp + sums);
}

/** The files a check ran on: "every part" when it is all of them, else the files (the first and last of many). */
function filesOf(files: string[], group: number, parts: string[]): string {
  const one = (f: string, j: number): string => txt(`verify.group.${group}.file.${j}`, f, 'span', { class: 'mono' });
  if (parts.length > 1 && files.length === parts.length && files.every((f, j) => f === parts[j])) return `every part (${one(files[0]!, 0)} to ${one(files[files.length - 1]!, files.length - 1)})`;
  if (files.length <= 6) return files.map(one).join(', ');
  return `${files.slice(0, 3).map(one).join(', ')}, … ${one(files[files.length - 1]!, files.length - 1)}`;
}

function renderVerify(v: VerifyReport | null, m: Manifest | null): string {
  if (!v) {
    return section('verify', 'Verification', '', '<p class="none">This report was made without re-reading the parts. <code>rowdeck report DIR --verify</code> checks every file against the manifest first and shows the result here; <code>rowdeck verify DIR</code> does the checks alone.</p>');
  }
  const n = countChecks(v);
  const status = v.ok
    ? `<p><span class="ok">Passed.</span> ${fig('verify.records', formatCount(v.records))} records in ${fig('verify.parts', plural(v.parts, 'part'))} re-read: ${fig('verify.passed', formatCount(n.passed))} checks passed${n.skipped ? `, ${fig('verify.skipped', formatCount(n.skipped))} skipped` : ''}.</p>`
    : `<p><span class="fail">Failed.</span> ${fig('verify.mismatches', plural(v.mismatches.length, 'mismatch', 'mismatches'))}; ${fig('verify.failed', formatCount(n.failed))} checks failed, ${fig('verify.passed', formatCount(n.passed))} passed${n.skipped ? `, ${fig('verify.skipped', formatCount(n.skipped))} skipped` : ''}.</p>`;
  const against = v.against
    ? `<p>Against the inputs (${v.against.inputs.map((p, i) => txt(`verify.against.${i}`, p, 'code')).join(', ')}): ${v.against.differences === null ? '<span class="ok">the output holds exactly their records.</span>' : '<span class="fail">the output and the inputs hold different records.</span>'}</p>`
    : '';
  const groups = groupChecks(v.checks);
  const partPaths = m ? m.output.parts.map((p) => p.path) : [];
  const checks = table(
    'Which checks ran on which files.',
    [{ label: 'check' }, { label: 'outcome' }, { label: 'files', n: true }, { label: 'on' }],
    groups.map((g, i) => ({
      cells: [
        lbl(g.check),
        `<span class="${g.status === 'passed' ? 'ok' : g.status === 'failed' ? 'fail' : 'none'}">${g.status}</span>`,
        fig(`verify.group.${i}.files`, formatCount(g.files.length)),
        filesOf(g.files, i, partPaths) + (g.notes.length ? `<br><span class="note">${g.notes.map((t, j) => txt(`verify.group.${i}.note.${j}`, t)).join('; ')}</span>` : ''),
      ],
    })),
  );
  const listed = v.mismatches.slice(0, LISTED_MISMATCHES);
  const mism = listed.length
    ? table(
        'Mismatches.',
        [{ label: 'file' }, { label: 'check' }, { label: 'item' }, { label: 'expected' }, { label: 'found' }],
        listed.map((x, i) => ({
          cells: [
            txt(`verify.mismatch.${i}.file`, x.file, 'span', { class: 'mono' }),
            lbl(x.check),
            x.item === undefined ? '' : txt(`verify.mismatch.${i}.item`, x.item),
            txt(`verify.mismatch.${i}.expected`, String(x.expected), 'code'),
            txt(`verify.mismatch.${i}.found`, String(x.found), 'code'),
          ],
        })),
      )
    : '';
  return section('verify', 'Verification', 'Every file re-read and checked against the manifest: sizes, checksums, records, classes, folds and fingerprints.', status + against + checks + mism);
}
