/**
 * The report's four kinds of chart, drawn from plain rows (see html.ts for where they come from).
 * Widths are in CSS pixels of a 960-pixel column; the SVGs scale down with the page.
 */
import { escapeText } from './escape.js';
import { withinTolerance } from '../core/balance.js';
import { formatCount, formatNumber, formatPercent, formatSignedPercent } from './format.js';
import { chart, dataText, deviationFill, px, shorten, slotFill, tag } from './svg.js';

export const CHART_WIDTH = 960;
const LABEL_W = 176;
const RIGHT_W = 92;

/** A class column or segment: one class, or several folded into "other classes". */
export interface ClassColumn {
  /** Class indexes, joined with "," in keys. */
  classes: number[];
  label: string;
  /** Key of the label (`class.S.name`), or null for "other classes". */
  labelKey: string | null;
  slot: number;
}

export interface MixRow {
  /** Unit key: `whole`, `part.P`, `fold.S.K`. */
  key: string;
  label: string;
  /** Whether the label is data (a path, a fold name) to mark, or our own words. */
  labelIsData: boolean;
  records: number;
  /** Records per column, aligned with the columns. */
  counts: number[];
}

export function listKey(classes: number[]): string {
  return classes.join(',');
}

/** Text of a row label: data marked for checking, our own words as they are. */
function rowLabel(r: { key: string; label: string; labelIsData: boolean }, x: number, y: number, max: number, bold = false): string {
  const attrs = { x, y, class: bold ? 'lab strong' : 'lab', 'text-anchor': 'end' };
  return r.labelIsData ? dataText(`${r.key}.name`, r.label, max, attrs) : tag('text', attrs, escapeText(r.label));
}

/**
 * Stacked bars: each row is 100% of its records, split by class. Dashed guides continue the
 * first row's (the whole input's) boundaries down through the others, so a part whose mix
 * strays shows its segment edges off the guides.
 */
export function mixChart(id: string, rows: MixRow[], columns: ClassColumn[], title: string, desc: string): string {
  const barW = CHART_WIDTH - LABEL_W - RIGHT_W;
  const rowH = rows.length > 40 ? 12 : 18;
  const gap = rows.length > 40 ? 3 : 6;
  const top = 4;
  const parts: string[] = [];
  const yOf = (i: number): number => top + i * (rowH + gap) + (i > 0 ? gap * 2 : 0);
  rows.forEach((r, i) => {
    const y = yOf(i);
    parts.push(rowLabel(r, LABEL_W - 8, y + rowH / 2 + 4, 26, i === 0));
    let x = LABEL_W;
    r.counts.forEach((n, c) => {
      if (n <= 0 || r.records <= 0) return;
      const w = (n / r.records) * barW;
      const col = columns[c]!;
      const key = `${r.key}.class.${listKey(col.classes)} ${r.key}.cshare.${listKey(col.classes)}`;
      const tip = tag('title', { 'data-k': key }, `${formatCount(n)} records, ${formatPercent(n / r.records)} · ${escapeText(col.label)} in ${escapeText(r.label)}`);
      parts.push(tag('rect', { x: px(x), y, width: px(w), height: rowH, fill: slotFill(col.slot) }, tip));
      x += w;
    });
    parts.push(tag('rect', { x: LABEL_W, y, width: barW, height: rowH, fill: 'none', stroke: '#4a4a4a', 'stroke-width': 0.6 }));
    parts.push(tag('text', { x: CHART_WIDTH - 4, y: y + rowH / 2 + 4, class: 'num', 'text-anchor': 'end', 'data-k': `${r.key}.records` }, formatCount(r.records)));
  });
  const whole = rows[0];
  if (whole && rows.length > 1 && whole.records > 0) {
    let acc = 0;
    const y1 = yOf(1) - gap;
    const y2 = yOf(rows.length - 1) + rowH + 2;
    for (let c = 0; c < whole.counts.length - 1; c++) {
      acc += whole.counts[c]!;
      const x = LABEL_W + (acc / whole.records) * barW;
      parts.push(tag('line', { x1: px(x), x2: px(x), y1, y2, class: 'guide' }));
    }
  }
  const height = yOf(rows.length - 1) + rowH + 6;
  return chart(id, CHART_WIDTH, height, title, desc, parts.join(''));
}

export interface GridRow {
  key: string;
  label: string;
  records: number;
  /** Per column: records and signed deviation. */
  cells: { count: number; deviation: number }[];
}

/**
 * The deviation of each class's share in each unit from its overall share: blue below, orange
 * above, darker with size on a scale that ends at `range` (the largest deviation). The largest
 * cell is outlined in black; a cell beyond the tolerance (none in a manifest rowdeck wrote, which
 * refuses such a run) gets a red dashed outline.
 */
export function deviationGrid(id: string, rows: GridRow[], columns: ClassColumn[], range: number, tolerance: number, worst: { row: string; column: number } | null, title: string, desc: string): string {
  const cols = columns.length;
  const cw = Math.max(14, Math.min(72, Math.floor((CHART_WIDTH - LABEL_W - 8) / Math.max(1, cols))));
  const ch = rows.length > 40 ? 13 : 20;
  const rotated = cw < 66;
  const longest = Math.max(...columns.map((c) => Math.min(22, [...c.label].length)));
  const head = rotated ? Math.min(130, 14 + longest * 5.6) : 22;
  const showText = cw >= 50 && ch >= 18;
  const parts: string[] = [];
  columns.forEach((c, j) => {
    const x = LABEL_W + j * cw + cw / 2;
    const attrs = rotated ? { x: 0, y: 0, class: 'lab', transform: `translate(${px(x + 4)},${px(head - 6)}) rotate(-55)` } : { x: px(x), y: head - 7, class: 'lab', 'text-anchor': 'middle' };
    const max = rotated ? 22 : Math.max(4, Math.floor(cw / 6.4));
    parts.push(c.labelKey ? dataText(c.labelKey, c.label, max, attrs) : tag('text', attrs, escapeText(c.label)));
  });
  rows.forEach((r, i) => {
    const y = head + i * ch;
    parts.push(rowLabel({ key: r.key, label: r.label, labelIsData: true }, LABEL_W - 8, y + ch / 2 + 4, 26));
    r.cells.forEach((cell, j) => {
      const x = LABEL_W + j * cw;
      const col = columns[j]!;
      const { fill, ink } = deviationFill(cell.deviation, range);
      const isWorst = worst !== null && worst.row === r.key && worst.column === j;
      const beyond = !withinTolerance(Math.abs(cell.deviation), tolerance);
      const list = listKey(col.classes);
      const tip = tag('title', { 'data-k': `${r.key}.dev.${list} ${r.key}.class.${list}` }, `${formatSignedPercent(cell.deviation)}, ${formatCount(cell.count)} records · ${escapeText(col.label)} in ${escapeText(r.label)}${isWorst ? ' (the largest deviation)' : ''}`);
      parts.push(tag('rect', { x: px(x + 0.5), y: px(y + 0.5), width: px(cw - 1), height: px(ch - 1), fill, class: beyond ? 'cell beyond' : 'cell' }, tip));
      if (showText) parts.push(tag('text', { x: px(x + cw / 2), y: px(y + ch / 2 + 4), 'text-anchor': 'middle', class: ink === '#ffffff' ? 'cellnum on-dark' : 'cellnum', 'data-k': `${r.key}.dev.${list}` }, formatSignedPercent(cell.deviation)));
      if (isWorst) parts.push(tag('rect', { x: px(x + 1.25), y: px(y + 1.25), width: px(cw - 2.5), height: px(ch - 2.5), class: 'worst' }));
    });
  });
  const height = head + rows.length * ch + 4;
  return chart(id, Math.max(CHART_WIDTH / 2, LABEL_W + cols * cw + 8), height, title, desc, parts.join(''));
}

/** The colour scale of the deviation grid, from `range` under to `range` over, with the tolerance marked. */
export function deviationLegend(id: string, range: number, tolerance: number): string {
  const x0 = 150;
  const w = 360;
  const steps = 10;
  const parts: string[] = [];
  for (let i = 0; i < steps; i++) {
    // Step centres from −range to +range.
    const d = range > 0 ? ((i + 0.5) / steps) * 2 * range - range : 0;
    parts.push(tag('rect', { x: px(x0 + (i * w) / steps), y: 8, width: px(w / steps), height: 14, fill: deviationFill(d, range).fill, stroke: '#fff', 'stroke-width': 0.5 }));
  }
  parts.push(tag('rect', { x: x0, y: 8, width: w, height: 14, fill: 'none', stroke: '#4a4a4a', 'stroke-width': 0.6 }));
  parts.push(tag('text', { x: x0 - 6, y: 19, 'text-anchor': 'end', class: 'lab' }, 'share below the whole'));
  parts.push(tag('text', { x: x0 + w + 6, y: 19, class: 'lab' }, 'share above'));
  if (range > 0) {
    parts.push(tag('text', { x: x0, y: 36, class: 'num', 'data-k': 'worst.size' }, formatPercent(range, 2)));
    parts.push(tag('text', { x: x0 + w, y: 36, class: 'num', 'text-anchor': 'end', 'data-k': 'worst.size' }, formatPercent(range, 2)));
  }
  parts.push(tag('text', { x: x0 + w / 2, y: 36, class: 'lab', 'text-anchor': 'middle' }, 'same share'));
  let height = 44;
  if (range > 0 && tolerance <= range) {
    for (const side of [-1, 1]) {
      const x = x0 + w / 2 + (side * (tolerance / range) * w) / 2;
      parts.push(tag('line', { x1: px(x), x2: px(x), y1: 4, y2: 26, class: 'tol' }));
    }
    parts.push(tag('text', { x: x0 + w / 2, y: 52, class: 'lab', 'text-anchor': 'middle' }, `red lines: the tolerance, ${tag('tspan', { 'data-k': 'balance.tolerance' }, formatPercent(tolerance, 2))} either way`));
    height = 60;
  } else {
    parts.push(
      tag(
        'text',
        { x: x0 + w / 2, y: 52, class: 'lab', 'text-anchor': 'middle' },
        `the tolerance, ${tag('tspan', { 'data-k': 'balance.tolerance' }, formatPercent(tolerance, 2))}, lies beyond both ends`,
      ),
    );
    height = 60;
  }
  return chart(id, CHART_WIDTH, height, 'Colour scale of the deviations', `Cells are blue where a class's share is below its share in the whole input and orange where it is above, darker the further off, up to the largest deviation at either end.`, parts.join(''));
}

export interface SizeRow {
  key: string;
  label: string;
  records: number;
  /** The mean size of its group (split), drawn as a tick. */
  mean: number;
}

/** Records per part as bars, each with a tick at the mean size of its split. */
export function sizeChart(id: string, rows: SizeRow[], title: string, desc: string): string {
  const barW = CHART_WIDTH - LABEL_W - RIGHT_W;
  const rowH = rows.length > 40 ? 10 : 14;
  const gap = rows.length > 40 ? 3 : 5;
  const largest = Math.max(1, ...rows.map((r) => Math.max(r.records, r.mean)));
  const parts: string[] = [];
  rows.forEach((r, i) => {
    const y = 4 + i * (rowH + gap);
    parts.push(rowLabel({ key: r.key, label: r.label, labelIsData: true }, LABEL_W - 8, y + rowH / 2 + 4, 26));
    parts.push(tag('rect', { x: LABEL_W, y, width: px(Math.max(0.5, (r.records / largest) * barW)), height: rowH, class: 'sizebar' }));
    const mx = LABEL_W + (r.mean / largest) * barW;
    parts.push(tag('line', { x1: px(mx), x2: px(mx), y1: y - 2, y2: y + rowH + 2, class: 'meantick' }));
    parts.push(tag('text', { x: CHART_WIDTH - 4, y: y + rowH / 2 + 4, class: 'num', 'text-anchor': 'end', 'data-k': `${r.key}.records` }, formatCount(r.records)));
  });
  return chart(id, CHART_WIDTH, 8 + rows.length * (rowH + gap), title, desc, parts.join(''));
}

export interface SpreadRow {
  key: string;
  label: string;
  labelIsData: boolean;
  mean: number | null;
  sd: number | null;
}

/** The smallest of 1, 2, 5 × 10^k at or above x (an axis end people can read). */
export function niceCeil(x: number): number {
  if (!(x > 0)) return 0;
  const p = 10 ** Math.floor(Math.log10(x));
  for (const m of [1, 2, 5, 10]) if (m * p >= x * (1 - 1e-12)) return m * p;
  return 10 * p;
}

/**
 * A numeric column in each unit against the whole input (the first row), on two scales: how far
 * the unit's mean is from the whole's, in the whole's standard deviations, and the unit's
 * standard deviation over the whole's. Both are centred on the whole (0 and ×1), so a unit that
 * looks like the whole sits on the dashed lines; each axis ends at a round figure just past the
 * furthest unit. The figures themselves are at the right.
 */
export function spreadChart(id: string, column: number, rows: SpreadRow[], title: string, desc: string): string {
  const whole = rows[0]!;
  const mu = whole.mean ?? 0;
  const sigma = whole.sd ?? 0;
  const ax = { from: LABEL_W + 14, width: 300 };
  const bx = { from: ax.from + ax.width + 40, width: 220 };
  const rowH = rows.length > 40 ? 11 : 17;
  const top = 30;
  const offsets = rows.map((r) => (r.mean === null || !(sigma > 0) ? null : (r.mean - mu) / sigma));
  const ratios = rows.map((r) => (r.sd === null || !(sigma > 0) ? null : r.sd / sigma));
  const endA = niceCeil(Math.max(1e-3, ...offsets.map((o) => Math.abs(o ?? 0))));
  const endB = niceCeil(Math.max(1e-3, ...ratios.map((q) => Math.abs((q ?? 1) - 1))));
  const xa = (o: number): number => ax.from + ax.width / 2 + (o / endA) * (ax.width / 2);
  const xb = (q: number): number => bx.from + bx.width / 2 + ((q - 1) / endB) * (bx.width / 2);
  const bottom = top + rows.length * rowH + 2;
  const parts: string[] = [];
  const axis = (x0: number, w: number, heading: string, left: string, right: string): void => {
    parts.push(tag('text', { x: px(x0 + w / 2), y: 11, 'text-anchor': 'middle', class: 'lab strong' }, escapeText(heading)));
    parts.push(tag('text', { x: px(x0), y: 25, class: 'axis' }, escapeText(left)));
    parts.push(tag('text', { x: px(x0 + w), y: 25, 'text-anchor': 'end', class: 'axis' }, escapeText(right)));
    parts.push(tag('rect', { x: px(x0), y: top - 2, width: px(w), height: bottom - top + 2, class: 'panel' }));
    parts.push(tag('line', { x1: px(x0 + w / 2), x2: px(x0 + w / 2), y1: top - 2, y2: bottom, class: 'meanline' }));
  };
  const fmt = (x: number): string => String(Number(x.toPrecision(3)));
  axis(ax.from, ax.width, 'mean, off the whole’s', `−${fmt(endA)} sd`, `+${fmt(endA)} sd`);
  axis(bx.from, bx.width, 'spread, against the whole’s', `×${fmt(1 - endB)}`, `×${fmt(1 + endB)}`);
  rows.forEach((r, i) => {
    const y = top + i * rowH + rowH / 2;
    parts.push(rowLabel(r, LABEL_W - 8, y + 4, 26, i === 0));
    const cls = i === 0 ? 'dot whole' : 'dot';
    const o = offsets[i];
    if (o !== null && o !== undefined) parts.push(tag('circle', { cx: px(xa(o)), cy: px(y), r: i === 0 ? 4 : 3, class: cls }));
    const q = ratios[i];
    if (q !== null && q !== undefined) parts.push(tag('circle', { cx: px(xb(q)), cy: px(y), r: i === 0 ? 4 : 3, class: cls }));
    const keys = [`${r.key}.stat.${column}.mean`, ...(r.sd !== null ? [`${r.key}.stat.${column}.sd`] : [])].join(' ');
    const text = r.mean === null ? 'no values' : `mean ${formatNumber(r.mean)}${r.sd !== null ? `, sd ${formatNumber(r.sd)}` : ''}`;
    parts.push(tag('text', { x: CHART_WIDTH - 4, y: y + 4, class: i === 0 ? 'num strong' : 'num', 'text-anchor': 'end', ...(r.mean !== null ? { 'data-k': keys } : {}) }, text));
  });
  return chart(id, CHART_WIDTH, bottom + 4, title, desc, parts.join(''));
}

/** A small meter: how much of the tolerance the largest deviation used. */
export function toleranceMeter(id: string, deviation: number, tolerance: number): string {
  const w = 200;
  const used = tolerance > 0 ? Math.min(1, deviation / tolerance) : deviation > 0 ? 1 : 0;
  const body =
    tag('rect', { x: 0, y: 2, width: w, height: 10, class: 'meterbg' }) +
    tag('rect', { x: 0, y: 2, width: px(Math.max(used > 0 ? 2 : 0, used * w)), height: 10, class: used >= 1 ? 'meter over' : 'meter' }) +
    tag('line', { x1: w, x2: w, y1: 0, y2: 14, class: 'tol' });
  return chart(id, w + 2, 14, 'Share of the tolerance used', 'A bar as long as the largest deviation, on a track as long as the tolerance (the red line).', body);
}

/** Horizontal bars of class counts (the profile's class balance). */
export function countChart(id: string, rows: { key: string; label: string; labelKey: string | null; count: number; share: number; slot: number }[], title: string, desc: string): string {
  const barW = CHART_WIDTH - LABEL_W - 150;
  const rowH = rows.length > 40 ? 11 : 16;
  const gap = rows.length > 40 ? 3 : 5;
  const largest = Math.max(1, ...rows.map((r) => r.count));
  const parts: string[] = [];
  rows.forEach((r, i) => {
    const y = 4 + i * (rowH + gap);
    const attrs = { x: LABEL_W - 8, y: y + rowH / 2 + 4, class: 'lab', 'text-anchor': 'end' };
    parts.push(r.labelKey ? dataText(r.labelKey, r.label, 26, attrs) : tag('text', attrs, escapeText(shorten(r.label, 26).text)));
    parts.push(tag('rect', { x: LABEL_W, y, width: px(Math.max(0.5, (r.count / largest) * barW)), height: rowH, fill: slotFill(r.slot), stroke: '#4a4a4a', 'stroke-width': 0.5 }));
    parts.push(tag('text', { x: CHART_WIDTH - 4, y: y + rowH / 2 + 4, class: 'num', 'text-anchor': 'end', 'data-k': `${r.key}.count ${r.key}.share` }, `${formatCount(r.count)} · ${formatPercent(r.share)}`));
  });
  return chart(id, CHART_WIDTH, 8 + rows.length * (rowH + gap), title, desc, parts.join(''));
}

/** Horizontal bars of missing values per column, as a share of the records. */
export function missingChart(id: string, rows: { key: string; label: string; missing: number; share: number }[], title: string, desc: string): string {
  const barW = CHART_WIDTH - LABEL_W - 150;
  const rowH = rows.length > 40 ? 10 : 14;
  const gap = 4;
  const parts: string[] = [];
  rows.forEach((r, i) => {
    const y = 4 + i * (rowH + gap);
    parts.push(dataText(`${r.key}.name`, r.label, 26, { x: LABEL_W - 8, y: y + rowH / 2 + 4, class: 'lab', 'text-anchor': 'end' }));
    parts.push(tag('rect', { x: LABEL_W, y, width: barW, height: rowH, class: 'meterbg' }));
    if (r.missing > 0) parts.push(tag('rect', { x: LABEL_W, y, width: px(Math.max(1.5, r.share * barW)), height: rowH, class: 'missbar' }));
    parts.push(tag('text', { x: CHART_WIDTH - 4, y: y + rowH / 2 + 4, class: 'num', 'text-anchor': 'end', 'data-k': `${r.key}.missing ${r.key}.missingShare` }, `${formatCount(r.missing)} · ${formatPercent(r.share)}`));
  });
  return chart(id, CHART_WIDTH, 8 + rows.length * (rowH + gap), title, desc, parts.join(''));
}
