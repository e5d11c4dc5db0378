/**
 * The profile of an input as one HTML page, before any shuffle: its class balance, missing values
 * and column summaries, with the warnings `rowdeck profile` gives. Pure, like the shuffle report,
 * and marked the same way (data-k / data-s / data-t; keys: `records`, `col.3.missing`,
 * `byclass.0.2.count` (class 2 of stratify column 0), `stratum.4.share`, `warning.1.message`, …).
 */
import { stratumLabel } from '../core/strata.js';
import type { Profile, ProfileClass } from '../engine/profile.js';
import { countChart, missingChart } from './charts.js';
import { escapeText } from './escape.js';
import { formatCount, formatPercent, plural } from './format.js';
import { columnTable, fig, renderBins, section, table, txt } from './html.js';
import { chooseClasses } from './model.js';
import { renderPage } from './page.js';
import { SLOTS } from './svg.js';

/** Classes drawn one by one in a balance chart; the smallest of more are drawn as one bar. */
export const CHART_CLASSES = 40;
/** Columns drawn in the missing-values chart (those with the most missing); the table has all. */
export const CHART_COLUMNS = 60;

export interface ProfileReportOptions {
  /** Shown in the heading; default: the inputs' paths. */
  title?: string;
}

function classLabel(c: ProfileClass, index: number): string {
  return stratumLabel(c.value, index);
}

export function renderProfileReport(p: Profile, options: ProfileReportOptions = {}): string {
  const body: string[] = [];
  const names = p.inputs.map((x, i) => txt(`input.${i}.path`, x.path, 'span', { class: 'mono' }));
  body.push(
    `<header class="top"><h1><span class="what">Input profile: </span>${names.length === 1 ? names[0] : `${fig('inputs.count', plural(p.inputs.length, 'input'))}`}</h1>` +
      `<p>${fig('records', formatCount(p.records))} records, ${fig('columns.count', plural(p.columns.length, 'column'))}${p.rejected > 0 ? `, ${fig('rejected', formatCount(p.rejected))} malformed records left out` : ''}. Profiled by rowdeck ${txt('tool.version', p.tool.version)} before any shuffle.</p></header>`,
  );
  const withMissing = p.columns.filter((c) => c.missing > 0).length;
  body.push(
    '<dl class="facts">' +
      `<div class="fact"><dt>Records</dt><dd><span class="big">${fig('records', formatCount(p.records))}</span><br><span class="small">in ${fig('inputs.count', plural(p.inputs.length, 'input'))}</span></dd></div>` +
      `<div class="fact"><dt>Columns</dt><dd><span class="big">${fig('columns.count', formatCount(p.columns.length))}</span><br><span class="small">${fig('columns.withMissing', formatCount(withMissing))} with missing values</span></dd></div>` +
      `<div class="fact"><dt>Classes</dt><dd>${p.strata ? `<span class="big">${fig('strata.count', formatCount(p.strata.values.length))}</span><br><span class="small">of ${txt('strata.columns', p.strata.columns.join(' × '))}</span>` : '<span class="big">—</span><br><span class="small">no <code>--stratify</code> given</span>'}</dd></div>` +
      `<div class="fact"><dt>Warnings</dt><dd><span class="big ${p.warnings.length ? 'fail' : 'ok'}">${fig('warnings.count', formatCount(p.warnings.length))}</span><br><span class="small">checked for ${fig('plan.partitions', plural(p.plan.partitions, 'partition'))}${p.plan.folds > 1 ? `, ${fig('plan.folds', plural(p.plan.folds, 'fold'))}` : ''}, tolerance ${fig('plan.tolerance', formatPercent(p.plan.tolerance, 2))}</span></dd></div>` +
      '</dl>',
  );
  if (p.warnings.length > 0) {
    body.push(section('warnings', 'Warnings', '', `<ul class="warnings">${p.warnings.map((w, i) => `<li>${txt(`warning.${i}.message`, w.message)}</li>`).join('')}</ul>`));
  }
  if (p.strata) {
    const blocks: string[] = [];
    p.strata.byColumn.forEach((col, b) => {
      const all = col.values.map((c, v) => ({ index: v, label: classLabel(c, v), records: c.count, share: c.share }));
      const { shown, other } = chooseClasses(all, CHART_CLASSES);
      const rows = shown.map((v, k) => ({ key: `byclass.${b}.${v}`, label: all[v]!.label, labelKey: `byclass.${b}.${v}.name` as string | null, count: all[v]!.records, share: all[v]!.share, slot: k % SLOTS }));
      if (other.length > 0) {
        rows.push({ key: `byclass.${b}.${other.join(',')}`, label: 'other classes', labelKey: null, count: other.reduce((a, v) => a + all[v]!.records, 0), share: other.reduce((a, v) => a + all[v]!.share, 0), slot: SLOTS });
      }
      blocks.push(
        `<h3>${txt(`byclass.${b}.column`, col.column)}</h3><figure>${countChart(`balance-${b}`, rows, `Records per class`, `One bar per class, as long as its count.`)}` +
          `<figcaption>${fig(`byclass.${b}.count`, plural(col.values.length, 'class', 'classes'))}.${other.length > 0 ? ' The smallest are drawn together as "other classes"; the table lists every one.' : ''}</figcaption></figure>` +
          table(
            'Every class, with its records and share.',
            [{ label: 'class' }, { label: 'records', n: true }, { label: 'share', n: true }],
            all.map((c) => ({ cells: [txt(`byclass.${b}.${c.index}.name`, c.label), fig(`byclass.${b}.${c.index}.count`, formatCount(c.records)), fig(`byclass.${b}.${c.index}.share`, formatPercent(c.share))] })),
          ),
      );
    });
    if (p.strata.columns.length > 1) {
      blocks.push(
        `<h3>Combinations</h3><p>A shuffle with the same <code>--stratify</code> keeps each combination at its share: ${fig('strata.count', plural(p.strata.values.length, 'combination'))}.</p>` +
          table(
            'Every combination of the stratify columns.',
            [{ label: 'class' }, { label: 'records', n: true }, { label: 'share', n: true }],
            p.strata.values.map((c, v) => ({ cells: [txt(`stratum.${v}.name`, classLabel(c, v)), fig(`stratum.${v}.count`, formatCount(c.count)), fig(`stratum.${v}.share`, formatPercent(c.share))] })),
          ),
      );
    }
    body.push(section('classes', 'Class balance', 'How the records divide among the classes a shuffle with the same <code>--stratify</code> would keep in step. A class with fewer records than parts or folds cannot be in every one.', blocks.join('\n')));
  }
  const cols = p.columns.map((c, i) => ({ key: `col.${i}`, label: c.name, missing: c.missing, share: p.records > 0 ? c.missing / p.records : 0, i }));
  const drawn = cols.length > CHART_COLUMNS ? [...cols].sort((a, b) => b.missing - a.missing || a.i - b.i).slice(0, CHART_COLUMNS).sort((a, b) => a.i - b.i) : cols;
  body.push(
    section(
      'missing',
      'Missing values',
      'Empty fields (CSV, TSV) and absent or null keys (JSON Lines) per column, as a share of the records.',
      `<figure>${missingChart('missing', drawn, 'Missing values per column', 'One bar per column: the share of records without a value.')}${drawn.length < cols.length ? '<figcaption>The columns with the most missing values; the table below lists every column.</figcaption>' : ''}</figure>`,
    ),
  );
  const top = table(
    'The most frequent values of each column, with their share of its values.',
    [{ label: 'column' }, { label: 'frequent values' }],
    p.columns.map((c, i) => ({
      cells: [
        txt(`col.${i}.name`, c.name),
        c.top === null
          ? `<span class="note">${c.approximate ? 'too many values to count them one by one' : 'left out (<code>--exclude-values</code>)'}</span>`
          : c.top.map((t, j) => `${txt(`col.${i}.top.${j}.value`, t.value, 'code')} ${fig(`col.${i}.top.${j}.share`, formatPercent(t.count / Math.max(1, c.count)))}`).join(', '),
      ],
    })),
  );
  body.push(section('columns', 'Columns', 'Type, counts, range and, for numbers, mean and sample standard deviation. Distinct counts marked ~ are estimates.', columnTable('Every column.', p.columns, 'col') + top));
  if (p.strata && p.strata.bins.length > 0) body.push(renderBins(p.strata.bins, 'bins'));
  const inputs = table(
    'Inputs, in the order given.',
    [{ label: 'input' }, { label: 'format' }, { label: 'bytes read', n: true }, { label: 'records', n: true }, { label: 'rejected', n: true }],
    p.inputs.map((x, i) => ({
      cells: [txt(`input.${i}.path`, x.path, 'span', { class: 'mono' }), escapeText(x.format), fig(`input.${i}.bytes`, formatCount(x.bytes)), fig(`input.${i}.records`, formatCount(x.records)), fig(`input.${i}.rejected`, formatCount(x.rejected))],
    })),
  );
  const rejects = p.rejects.length
    ? table(
        'The first malformed records.',
        [{ label: 'where' }, { label: 'code' }, { label: 'reason' }],
        p.rejects.map((r, i) => ({ cells: [`${txt(`reject.${i}.file`, r.file, 'span', { class: 'mono' })}:${fig(`reject.${i}.line`, String(r.line))}`, escapeText(r.code), r.reason === null ? '' : txt(`reject.${i}.reason`, r.reason)] })),
      )
    : '';
  body.push(section('inputs', 'Inputs', '', inputs + rejects));
  body.push(
    `<footer>Made by rowdeck ${txt('tool.version', p.tool.version)}. ${p.excludeValues ? 'Data values were left out (<code>--exclude-values</code>): no min/max, frequent values or class names.' : 'This page shows values from the data (class names, min/max, frequent values): pass <code>--exclude-values</code> before sharing it.'} It runs no script and loads nothing.</footer>`,
  );
  const title = options.title ?? `rowdeck profile: ${p.inputs.map((x) => x.path).join(', ')}`;
  return renderPage(title, `rowdeck ${p.tool.version}`, body.join('\n'));
}
