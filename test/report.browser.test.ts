/**
 * The HTML report in a real browser: Debian's chromium, headless, opens pages made from real
 * rowdeck outputs (partitions with folds and --stats; splits with groups; 40 classes over 64
 * parts; a profile), takes a screenshot and prints the DOM it built. The screenshot must not be
 * blank and must show the page's own style (so its Content-Security-Policy let the style in);
 * every figure and text marked on the page must equal what the manifest (or profile, or verify
 * report) says, worked out independently in test/helpers/report-keys.ts; and no digit may stand
 * outside a mark. Class names made of markup must arrive as text: no element, no script, the
 * title unchanged (OWASP's XSS prevention rules: data is escaped for the context it lands in).
 *
 * Without chromium the file skips with one line; `.ci/run` installs it.
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runShuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import type { Manifest } from '../src/engine/manifest.js';
import type { Profile } from '../src/engine/profile.js';
import { writeReport } from '../src/report/write.js';
import { findChromium, renderInChromium } from './helpers/chromium.js';
import { colourCensus, decodePng } from './helpers/png.js';
import { find, parseDom, textOf, elements, type DomElement } from './helpers/dom.js';
import { checkMarks, manifestClassName, manifestValue, profileValue, type PageData } from './helpers/report-keys.js';

const CLI = fileURLToPath(new URL('../dist/cli/main.cjs', import.meta.url));
const EXAMPLE = fileURLToPath(new URL('../examples/sensor-readings.csv', import.meta.url));
const chromium = findChromium();
// CI (.ci/run) installs chromium: there, a missing browser is a failure, not a skip.
if (!chromium && process.env.CI) throw new Error('chromium not found, but CI is set: .ci/run should have installed it (apt-get install -y chromium).');
if (!chromium) process.stderr.write('report.browser.test.ts skipped: no chromium. Install it (apt-get install -y chromium, as .ci/run does) and run npm test again.\n');

const XSS_IMG = '<img src=x onerror=alert(1)>';
const XSS_SCRIPT = "</script><script>document.title='pwned'</script>";

let dir: string;

function cli(args: string[]): { status: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: dir, encoding: 'utf8', timeout: 120_000 });
  if (r.error) throw r.error;
  return r;
}

/** Opens a page; checks the screenshot is a real, styled page; returns its body and title. */
function open(file: string, width = 1100, height = 1600): { body: DomElement; title: string; root: DomElement } {
  const r = renderInChromium(chromium!, file, width, height);
  const img = decodePng(r.png);
  expect([img.width, img.height]).toEqual([width, height]);
  const census = colourCensus(img);
  // A blank or unstyled page has a handful of colours; this one has charts, patterns and text.
  expect(census.distinct).toBeGreaterThan(40);
  expect(census.offBackground).toBeGreaterThan(0.04);
  // The heading's rule is drawn in the page's accent colour (#12535c): present only if the page's
  // own style sheet was applied, i.e. its CSP hash is right.
  let accent = 0;
  for (let i = 0; i < img.width * img.height; i++) {
    const o = i * img.channels;
    if (img.pixels[o] === 0x12 && img.pixels[o + 1] === 0x53 && img.pixels[o + 2] === 0x5c) accent++;
  }
  expect(accent).toBeGreaterThan(500);
  const root = parseDom(r.dom);
  const body = find(root, 'body')[0]!;
  const title = textOf(find(root, 'title')[0]!);
  return { body, title, root };
}

/** Nothing in the DOM that could run or fetch: no script, no img, no handler attribute, no link out. */
function expectInert(root: DomElement): void {
  const all = [...elements(root)];
  expect(all.filter((e) => ['script', 'img', 'iframe', 'object', 'embed', 'link', 'a', 'image', 'use'].includes(e.tag)).map((e) => e.tag)).toEqual([]);
  for (const e of all) for (const a of e.attrs.keys()) expect(a.startsWith('on'), `${e.tag} has ${a}`).toBe(false);
  for (const e of all) for (const [a, v] of e.attrs) if (a === 'src' || a === 'href' || a === 'xlink:href') throw new Error(`${e.tag} ${a}="${v}"`);
}

function manifestOf(out: string): Manifest {
  return JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as Manifest;
}

/** Keys a page must show for every part and class (so a missing table or chart fails too). */
function expectEveryCell(keys: Set<string>, m: Manifest): void {
  m.output.parts.forEach((p, i) => {
    for (const k of ['records', 'bytes', 'sha256', 'fingerprint', 'name', 'share']) expect(keys.has(`part.${i}.${k}`), `part.${i}.${k}`).toBe(true);
    if (m.strata.columns.length > 0) m.strata.values.forEach((_, s) => expect(keys.has(`part.${i}.class.${s}`) && keys.has(`part.${i}.dev.${s}`), `part ${i} class ${s}`).toBe(true));
  });
  m.strata.values.forEach((_, s) => m.strata.columns.length > 0 && expect(keys.has(`class.${s}.name`), `class.${s}.name`).toBe(true));
  for (const k of ['seed', 'input.records', 'fingerprint.in', 'fingerprint.out', 'run.createdAt', 'input.0.path', 'input.0.bytes']) expect(keys.has(k), k).toBe(true);
}

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-browser-'));
});
afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe.skipIf(!chromium)('the report in headless chromium', () => {
  it('partitions with folds and --stats, made and verified through the CLI: every figure matches the manifest', async () => {
    const s = cli(['shuffle', EXAMPLE, '--out', 'folds', '--partitions', '4', '--folds', '5', '--stratify', 'fault', '--stats', '--seed', 'browser-1', '--report', '--quiet']);
    expect(s.status, s.stderr).toBe(0);
    const r = cli(['report', 'folds', '--verify']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout.trim()).toBe(join('folds', 'report.html'));
    const out = join(dir, 'folds');
    const m = manifestOf(out);
    const v = await verify({ dir: out });
    const page = open(join(out, 'report.html'));
    expectInert(page.root);
    expect(page.title).toBe('rowdeck shuffle report: folds');
    const data: PageData = { manifest: m, verify: v, folder: 'folds' };
    const marks = checkMarks(page.body, (k, t) => manifestValue(k, data, t));
    expectEveryCell(marks.keys, m);
    // Folds, statistics and the verify section are there.
    for (let k = 0; k < 5; k++) expect(marks.keys.has(`fold.0.${k}.records`)).toBe(true);
    expect(marks.keys.has('verify.passed')).toBe(true);
    expect([...marks.keys].some((k) => /^part\.\d+\.stat\.\d+\.mean$/.test(k))).toBe(true);
    expect([...marks.keys].some((k) => /^whole\.col\.\d+\.sd$/.test(k))).toBe(true);
    // The largest deviation the page computes is the one the engine recorded.
    expect(Math.abs(manifestValue('worst.deviation', data, false) as number)).toBeCloseTo(m.balance.maxDeviation, 12);
    expect(marks.figures).toBeGreaterThan(300);
  });

  it('named splits with groups, written by shuffle({ report: true })', async () => {
    const out = join(dir, 'grouped');
    const run = await runShuffle({ inputs: [EXAMPLE], out, split: 'train=0.7,valid=0.15,test=0.15', partitions: 2, group: 'sensor_id', stratify: 'fault', seed: 'browser-2', report: true });
    expect(run.report).toBe(join(out, 'report.html'));
    const page = open(run.report!);
    expectInert(page.root);
    const data: PageData = { manifest: run.manifest, verify: null, folder: 'grouped' };
    const marks = checkMarks(page.body, (k, t) => manifestValue(k, data, t));
    expectEveryCell(marks.keys, run.manifest);
    for (let i = 0; i < 3; i++) for (const k of ['name', 'weight', 'records', 'share']) expect(marks.keys.has(`split.${i}.${k}`)).toBe(true);
    for (const k of ['group.column', 'parts.minRecords', 'parts.maxRecords']) expect(marks.keys.has(k), k).toBe(true);
    // Groups make unequal parts: the page says how unequal.
    expect(manifestValue('parts.maxRecords', data, false)).toBeGreaterThan(manifestValue('parts.minRecords', data, false) as number);
  });

  it('40 classes over 64 parts stay legible: folded chart, full table, every figure right', async () => {
    const lines = ['reading_id,species,count'];
    let id = 0;
    for (let c = 0; c < 40; c++) for (let k = 0; k < Math.round(2400 / (c + 1)) + 30; k++) lines.push(`${++id},moth-${String(c).padStart(2, '0')},${(id * 7919) % 500}`);
    writeFileSync(join(dir, 'traps.csv'), lines.join('\n') + '\n');
    const out = join(dir, 'many');
    await runShuffle({ inputs: [join(dir, 'traps.csv')], out, partitions: 64, stratify: 'species', tolerance: 5, seed: 'browser-3' });
    const written = await writeReport(out);
    const page = open(written.path, 1100, 2400);
    expectInert(page.root);
    const data: PageData = { manifest: written.manifest, verify: null, folder: 'many' };
    const marks = checkMarks(page.body, (k, t) => manifestValue(k, data, t));
    expectEveryCell(marks.keys, written.manifest);
    // The stacked bars fold the smaller classes into one segment: a key naming several classes.
    expect([...marks.keys].some((k) => /^whole\.cshare\.\d+(,\d+){10,}$/.test(k))).toBe(true);
    expect(marks.figures).toBeGreaterThan(64 * 40 * 2);
  });

  it('class, column, file and seed text made of markup shows as text: no element, no script, the title unchanged', async () => {
    const weird = join(dir, 'in<b>put.csv');
    const rows = ['id,<svg onload=alert(2)>,note'];
    for (let i = 0; i < 60; i++) rows.push(`${i},"${[XSS_IMG, XSS_SCRIPT, 'plain & <b>bold</b>'][i % 3]!.replaceAll('"', '""')}",x`);
    writeFileSync(weird, rows.join('\n') + '\n');
    const folder = 'out-<i>x';
    const out = join(dir, folder);
    mkdirSync(out);
    const run = await runShuffle({ inputs: [weird], out, partitions: 3, stratify: '<svg onload=alert(2)>', seed: '<script>alert(3)</script>', report: true, force: true, stats: true });
    const page = open(run.report!);
    expectInert(page.root);
    expect(page.title).toBe(`rowdeck shuffle report: ${folder}`);
    const m = run.manifest;
    const names = m.strata.values.map((_, s) => manifestClassName(m, s));
    expect(names).toEqual(expect.arrayContaining([XSS_IMG, XSS_SCRIPT]));
    const data: PageData = { manifest: m, verify: null, folder };
    // Every class name, the column, the file name and the seed appear as their literal text.
    const marks = checkMarks(page.body, (k, t) => manifestValue(k, data, t));
    for (const k of ['class.0.name', 'class.1.name', 'class.2.name', 'strata.columns', 'seed', 'input.0.path', 'folder']) expect(marks.keys.has(k), k).toBe(true);
    const text = textOf(page.body);
    for (const s of [XSS_IMG, XSS_SCRIPT, '<svg onload=alert(2)>', '<script>alert(3)</script>', 'in<b>put.csv']) expect(text).toContain(s);
    expect(find(page.root, 'b')).toEqual([]);
    expect(find(page.root, 'i')).toEqual([]);
    expect(find(page.root, 'svg').every((e) => !e.attrs.has('onload'))).toBe(true);
  });

  it('the profile page (profile --html): class balance, missing values and every column summary match the profile', () => {
    const r = cli(['profile', EXAMPLE, '--stratify', 'fault,site', '--partitions', '8', '--html', 'profile.html', '--json', '--quiet']);
    expect(r.status, r.stderr).toBe(0);
    const p = JSON.parse(r.stdout) as Profile;
    const page = open(join(dir, 'profile.html'));
    expectInert(page.root);
    const marks = checkMarks(page.body, (k) => profileValue(k, { profile: p }));
    p.columns.forEach((_, i) => {
      for (const k of ['name', 'count', 'missing', 'distinct', 'missingShare']) expect(marks.keys.has(`col.${i}.${k}`), `col.${i}.${k}`).toBe(true);
    });
    p.strata!.byColumn.forEach((col, b) => col.values.forEach((_, v) => expect(marks.keys.has(`byclass.${b}.${v}.count`)).toBe(true)));
    p.strata!.values.forEach((_, v) => expect(marks.keys.has(`stratum.${v}.count`)).toBe(true));
  });
});
