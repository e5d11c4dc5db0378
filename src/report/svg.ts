/**
 * The report's charts as inline SVG strings: stacked bars of class mix, a grid of deviations,
 * bars of sizes, and means with their spread. Each chart is an `<svg role="img">` with a
 * `<title>` and `<desc>` (its text alternative, beside the table the page prints under it), and
 * each mark has a `<title>` with its figures. Colours always come with a pattern or a label, so
 * a chart reads in greyscale and for colour-blind readers.
 *
 * Every figure drawn as text carries `data-k` (the keys of the figures it shows, in the order
 * they appear; see html.ts) so it can be checked against the manifest. Text from the data goes
 * through escapeText.
 */
import { escapeText } from './escape.js';

// --- markup helpers --------------------------------------------------------------------------------

export type Attrs = Record<string, string | number | null | undefined>;

/** An element; attribute values are escaped, `inner` is markup already. */
export function tag(name: string, attrs: Attrs, inner?: string): string {
  let a = '';
  for (const [k, v] of Object.entries(attrs)) if (v !== null && v !== undefined) a += ` ${k}="${escapeText(String(v))}"`;
  return inner === undefined ? `<${name}${a}/>` : `<${name}${a}>${inner}</${name}>`;
}

/** Rounds a coordinate to 0.1 px (keeps the markup short). */
export function px(x: number): string {
  return String(Math.round(x * 10) / 10);
}

/** Cuts a label to `max` characters, with … at the end; `cut` says whether it was cut. */
export function shorten(s: string, max: number): { text: string; cut: boolean } {
  const chars = [...s];
  if (chars.length <= max) return { text: s, cut: false };
  return { text: chars.slice(0, Math.max(1, max - 1)).join('') + '…', cut: true };
}

/**
 * A label from the data: `data-s` names the string it shows in full, `data-t` one it shows cut
 * short (the whole text is then in its `<title>`).
 */
export function dataText(key: string, s: string, max: number, attrs: Attrs = {}, name = 'text'): string {
  const { text, cut } = shorten(s, max);
  const mark = cut ? { 'data-t': key } : { 'data-s': key };
  return tag(name, { ...attrs, ...mark }, escapeText(text) + (cut && name === 'text' ? tag('title', {}, escapeText(s)) : ''));
}

// --- palette -------------------------------------------------------------------------------------

/**
 * Class colours: eight hues from Okabe & Ito's colour-blind-safe set ("Color Universal Design",
 * 2008; common practice in scientific figures), each with its own pattern, so two classes differ
 * in pattern as well as hue. The ninth slot, "other classes", is a light grey with a cross-hatch.
 */
export const CLASS_COLOURS = ['#0072B2', '#E69F00', '#009E73', '#CC79A7', '#56B4E9', '#D55E00', '#F0E442', '#3D3D3D'];
export const OTHER_COLOUR = '#C9C9C9';
/** Names of the patterns, for the legend's text alternative. */
export const PATTERN_NAMES = ['solid', 'diagonal stripes', 'dots', 'horizontal stripes', 'reverse stripes', 'grid', 'vertical stripes', 'fine dots', 'cross-hatch'];
export const SLOTS = CLASS_COLOURS.length;

/** The fill of class slot `k` (SLOTS: "other"). */
export function slotFill(k: number): string {
  return `url(#rd-p${k})`;
}

/** Pattern definitions, written once per page in a hidden SVG and used by every chart. */
export function patternDefs(): string {
  const light = new Set(['#E69F00', '#56B4E9', '#F0E442', '#CC79A7', OTHER_COLOUR]);
  // Each overlay drawn in `ink` over the slot's colour (8 × 8 tiles).
  const lines = (d: string, w: number) => (ink: string, op: string): string => `<path d="${d}" fill="none" stroke="${ink}" stroke-width="${w}" opacity="${op}"/>`;
  const dots = (r: number, at: [number, number][]) => (ink: string, op: string): string => at.map(([x, y]) => `<circle cx="${x}" cy="${y}" r="${r}" fill="${ink}" opacity="${op}"/>`).join('');
  const overlays: ((ink: string, op: string) => string)[] = [
    () => '',
    lines('M-1,1 l2,-2 M0,8 l8,-8 M7,9 l2,-2', 1.6),
    dots(1.2, [[2, 2], [6, 6]]),
    lines('M0,2 h8 M0,6 h8', 1.4),
    lines('M-1,7 l2,2 M0,0 l8,8 M7,-1 l2,2', 1.6),
    lines('M0,2 h8 M2,0 v8 M0,6 h8 M6,0 v8', 1),
    lines('M2,0 v8 M6,0 v8', 1.4),
    dots(0.8, [[2, 2], [6, 2], [2, 6], [6, 6]]),
    lines('M0,0 l8,8 M8,0 l-8,8', 1),
  ];
  const defs = [...CLASS_COLOURS, OTHER_COLOUR].map((c, k) => {
    const ink = light.has(c) ? '#1a1a1a' : '#ffffff';
    const overlay = overlays[k]!(ink, light.has(c) ? '0.45' : '0.6');
    return `<pattern id="rd-p${k}" patternUnits="userSpaceOnUse" width="8" height="8"><rect width="8" height="8" fill="${c}"/>${overlay}</pattern>`;
  });
  return `<svg class="defs" width="0" height="0" aria-hidden="true" focusable="false"><defs>${defs.join('')}</defs></svg>`;
}

/** A legend swatch for slot k (an inline SVG square). */
export function swatch(k: number): string {
  return `<svg class="sw" width="16" height="16" viewBox="0 0 16 16" aria-hidden="true" focusable="false"><rect x="0.5" y="0.5" width="15" height="15" fill="${slotFill(k)}" stroke="#333" stroke-width="1"/></svg>`;
}

/** Deviation colours: blue below the overall share, orange above, darker with size (five steps each). */
const UNDER = ['#EEF3F8', '#C6DCEE', '#8DB9DD', '#4C8CC4', '#1F5F99'];
const OVER = ['#FAF0E6', '#F7D2AE', '#F0A868', '#D9782E', '#A2500F'];

/** Fill and text colour of a cell whose deviation is `d` on a scale ending at ±`range`. */
export function deviationFill(d: number, range: number): { fill: string; ink: string; step: number } {
  if (range <= 0 || d === 0) return { fill: '#F4F4F4', ink: '#1a1a1a', step: 0 };
  const step = Math.min(4, Math.floor((Math.abs(d) / range) * 5));
  const fill = (d < 0 ? UNDER : OVER)[step]!;
  return { fill, ink: step >= 3 ? '#ffffff' : '#1a1a1a', step };
}

// --- chart shells -------------------------------------------------------------------------------

/** An accessible chart: role img, labelled by its title and described by its desc; `id` unique in the page. */
export function chart(id: string, width: number, height: number, title: string, desc: string, body: string): string {
  return (
    `<svg class="chart" id="${id}" viewBox="0 0 ${px(width)} ${px(height)}" width="${px(width)}" height="${px(height)}" role="img" aria-labelledby="${id}-t ${id}-d">` +
    `<title id="${id}-t">${escapeText(title)}</title><desc id="${id}-d">${escapeText(desc)}</desc>${body}</svg>`
  );
}
