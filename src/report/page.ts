/**
 * The page around the report's content: one self-contained HTML file (styles inline, charts as
 * inline SVG, nothing fetched, no script), readable on screen and on paper. Its
 * Content-Security-Policy allows only its own style sheet (by hash): even a value that slipped
 * through unescaped could not run a script, load an image or send a request.
 */
import { createHash } from 'node:crypto';
import { escapeText } from './escape.js';
import { patternDefs } from './svg.js';

const STYLE = `
:root { --ink: #1e2430; --muted: #5a6270; --paper: #fbfaf6; --card: #ffffff; --rule: #d8d4ca; --accent: #12535c; --good: #1d6b3a; --bad: #a3261b; --warn: #8a5a00; }
* { box-sizing: border-box; }
html { background: var(--paper); }
body { margin: 0 auto; max-width: 1040px; padding: 28px 28px 48px; color: var(--ink); font: 14px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "Noto Sans", "DejaVu Sans", sans-serif; }
header.top { border-bottom: 3px solid var(--accent); padding-bottom: 12px; margin-bottom: 20px; }
header.top h1 { margin: 0; font-size: 24px; font-weight: 650; letter-spacing: -0.01em; }
header.top h1 .what { color: var(--accent); }
header.top p { margin: 4px 0 0; color: var(--muted); }
h2 { font-size: 18px; margin: 34px 0 6px; padding-top: 6px; border-top: 1px solid var(--rule); color: var(--accent); }
h3 { font-size: 15px; margin: 20px 0 4px; }
p.lead { margin: 0 0 10px; color: var(--muted); max-width: 46em; }
code, .mono { font-family: ui-monospace, "SF Mono", Menlo, Consolas, "DejaVu Sans Mono", monospace; font-size: 12.5px; }
.facts { display: grid; grid-template-columns: repeat(auto-fit, minmax(170px, 1fr)); gap: 10px; margin: 0; }
.fact { background: var(--card); border: 1px solid var(--rule); border-radius: 6px; padding: 10px 12px; }
.fact dt { font-size: 12px; text-transform: uppercase; letter-spacing: 0.04em; color: var(--muted); }
.fact dd { margin: 2px 0 0; }
.fact .big { font-size: 22px; font-weight: 650; font-variant-numeric: tabular-nums; }
.fact .small { font-size: 12.5px; color: var(--muted); }
.ok { color: var(--good); font-weight: 600; }
.fail { color: var(--bad); font-weight: 600; }
.none { color: var(--warn); font-weight: 600; }
figure { margin: 10px 0 6px; }
figcaption { font-size: 12.5px; color: var(--muted); margin-top: 4px; max-width: 52em; }
svg.chart { display: block; max-width: 100%; height: auto; overflow: visible; }
svg.chart text { font-size: 11px; fill: var(--ink); }
svg.chart text.lab { fill: #2b313c; }
svg.chart text.strong { font-weight: 700; }
svg.chart text.num { font-variant-numeric: tabular-nums; }
svg.chart text.cellnum { font-size: 10px; font-variant-numeric: tabular-nums; }
svg.chart text.on-dark { fill: #ffffff; }
svg.chart .guide { stroke: #1e2430; stroke-width: 0.8; stroke-dasharray: 2 2; opacity: 0.7; }
svg.chart .cell { stroke: #ffffff; stroke-width: 0.5; }
svg.chart .cell.beyond { stroke: var(--bad); stroke-width: 2; stroke-dasharray: 3 2; }
svg.chart .worst { fill: none; stroke: #000000; stroke-width: 2.5; }
svg.chart .tol { stroke: var(--bad); stroke-width: 2; }
svg.chart .sizebar { fill: #5d7f8a; }
svg.chart .meantick { stroke: #1e2430; stroke-width: 1.5; }
svg.chart .panel { fill: #f1f4f5; stroke: #d5dde0; stroke-width: 0.6; }
svg.chart text.axis { font-size: 10px; fill: var(--muted); }
svg.chart .meanline { stroke: var(--accent); stroke-width: 1.5; stroke-dasharray: 4 2; }
svg.chart .dot { fill: #ffffff; stroke: #1e2430; stroke-width: 1.5; }
svg.chart .dot.whole { fill: var(--accent); stroke: var(--accent); }
svg.chart .meterbg { fill: #ebe8e1; }
svg.chart .meter { fill: var(--accent); }
svg.chart .meter.over { fill: var(--bad); }
svg.chart .missbar { fill: #8a5a00; }
svg.defs { position: absolute; width: 0; height: 0; }
ul.legend { list-style: none; padding: 0; margin: 6px 0 4px; display: flex; flex-wrap: wrap; gap: 6px 16px; }
ul.legend li { display: flex; align-items: center; gap: 6px; }
ul.legend .pat { color: var(--muted); font-size: 11.5px; }
svg.sw { flex: none; }
.scroll { max-height: 440px; overflow: auto; border: 1px solid var(--rule); border-radius: 4px; background: var(--card); margin: 8px 0; }
table { border-collapse: collapse; font-size: 12.5px; width: max-content; min-width: 100%; }
th, td { padding: 3px 8px; border-bottom: 1px solid #ece9e2; text-align: left; vertical-align: top; }
thead th { position: sticky; top: 0; background: #f1efe9; font-weight: 600; z-index: 1; }
tbody th { font-weight: 500; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.whole td, tr.whole th { background: #f6f4ee; font-weight: 600; }
td .dv { color: var(--muted); }
td.clip { max-width: 22em; overflow: hidden; text-overflow: ellipsis; white-space: nowrap; }
.plain { margin: 8px 0; overflow-x: auto; }
.plain table { min-width: 0; }
dl.opts { display: grid; grid-template-columns: repeat(auto-fill, minmax(230px, 1fr)); gap: 2px 16px; margin: 4px 0 12px; }
dl.opts div { display: flex; gap: 8px; align-items: baseline; border-bottom: 1px solid #ece9e2; padding: 2px 0; }
dl.opts dt { color: var(--muted); min-width: 9.5em; }
dl.opts dd { margin: 0; overflow-wrap: anywhere; }
td.hot { outline: 2px solid #000; outline-offset: -2px; }
.note { font-size: 12.5px; color: var(--muted); }
.warnings li { margin: 2px 0; }
footer { margin-top: 40px; padding-top: 10px; border-top: 1px solid var(--rule); color: var(--muted); font-size: 12px; }
@media print {
  html, body { background: #ffffff; }
  body { max-width: none; padding: 0; font-size: 11px; }
  h2 { break-after: avoid; }
  figure, .fact, tr { break-inside: avoid; }
  .scroll { max-height: none; overflow: visible; border: none; }
  thead th { position: static; }
  a { color: inherit; text-decoration: none; }
}
`;

/** The Content-Security-Policy: nothing but this page's own style sheet. */
export function contentSecurityPolicy(): string {
  const hash = createHash('sha256').update(STYLE, 'utf8').digest('base64');
  return `default-src 'none'; style-src 'sha256-${hash}'; img-src 'none'; script-src 'none'; base-uri 'none'; form-action 'none'`;
}

/** The whole document: `title` is plain text (escaped here), `body` markup. */
export function renderPage(title: string, generator: string, body: string): string {
  return (
    '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n' +
    `<meta http-equiv="Content-Security-Policy" content="${contentSecurityPolicy()}">\n` +
    '<meta name="viewport" content="width=device-width, initial-scale=1">\n' +
    `<meta name="generator" content="${escapeText(generator)}">\n` +
    `<title>${escapeText(title)}</title>\n<style>${STYLE}</style>\n</head>\n<body>\n${patternDefs()}\n${body}\n</body>\n</html>\n`
  );
}
