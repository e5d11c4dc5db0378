/**
 * The report's pure parts, without a browser: escaping (OWASP's XSS prevention rule 1: escape
 * & < > " ' in element content and quoted attributes), the Content-Security-Policy's style hash
 * (CSP level 3: 'sha256-' + base64 of the SHA-256 of the style element's text), a page that
 * references nothing outside itself, --exclude-values pages without values, the deviations the
 * report computes against those the engine recorded, folding of many classes and parts, and the
 * atomic write (temporary file + rename).
 */
import { createHash } from 'node:crypto';
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runShuffle } from '../src/engine/shuffle.js';
import type { Manifest } from '../src/engine/manifest.js';
import { escapeText } from '../src/report/escape.js';
import { formatNumber, formatSignedPercent } from '../src/report/format.js';
import { renderManifestReport } from '../src/report/html.js';
import { buildReportModel, chooseClasses, chooseUnits, signedDeviation } from '../src/report/model.js';
import { niceCeil } from '../src/report/charts.js';
import { writeReport } from '../src/report/write.js';
import { RowdeckError } from '../src/errors.js';

let dir: string;
let folds: Manifest;
let hidden: Manifest;
let many: Manifest;

const NAMES = ['<img src=x onerror=alert(1)>', "</script><script>document.title='pwned'</script>", 'a "quoted" & \'single\' name', 'line\nbreak'];

function readings(): string {
  const rows = ['reading_id,site,fault,temp_c'];
  for (let i = 0; i < 400; i++) rows.push(`${i},site-${i % 7},"${NAMES[i % 4]!.replaceAll('"', '""')}",${((i * 37) % 90) / 3}`);
  return rows.join('\n') + '\n';
}

beforeAll(async () => {
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-report-'));
  writeFileSync(join(dir, 'r.csv'), readings());
  folds = (await runShuffle({ inputs: [join(dir, 'r.csv')], out: join(dir, 'folds'), partitions: 3, folds: 4, stratify: 'fault', seed: 'render', threads: 0, stats: true })).manifest;
  hidden = (await runShuffle({ inputs: [join(dir, 'r.csv')], out: join(dir, 'hidden'), partitions: 3, stratify: 'fault,site', seed: 'render', threads: 0, excludeValues: true, stats: true })).manifest;
  const rows = ['id,kind'];
  for (let c = 0; c < 40; c++) for (let k = 0; k < 200 - 4 * c; k++) rows.push(`${rows.length},k${String(c).padStart(2, '0')}`);
  writeFileSync(join(dir, 'many.csv'), rows.join('\n') + '\n');
  many = (await runShuffle({ inputs: [join(dir, 'many.csv')], out: join(dir, 'many'), partitions: 64, stratify: 'kind', tolerance: 10, seed: 'render', threads: 0 })).manifest;
});
afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('escaping', () => {
  it('escapes the five characters that can end text or an attribute, and shows control characters', () => {
    expect(escapeText(`<a href="x" onclick='y'>&amp;</a>`)).toBe('&lt;a href=&quot;x&quot; onclick=&#39;y&#39;&gt;&amp;amp;&lt;/a&gt;');
    expect(escapeText('a\nb\tc\u0000')).toBe('a\\nb\\tc\\x00');
    // A lone surrogate cannot be written in UTF-8: it becomes U+FFFD.
    expect(escapeText('x\ud800y')).toBe('x\ufffdy');
  });

  it('a page of hostile class names holds them only escaped: no tag, no script, no handler', () => {
    const html = renderManifestReport(folds, { folder: '<i>out</i>' });
    // No tag of theirs, and no handler inside any tag (as escaped text, "onerror=" is harmless).
    expect(html).not.toMatch(/<(script|img|i)\b/i);
    expect(html).not.toMatch(/<[^>]*\son(error|click|load)=/i);
    for (const n of NAMES.slice(0, 3)) expect(html).toContain(escapeText(n));
    expect(html).toContain('line\\nbreak');
  });
});

describe('a self-contained page', () => {
  it('its CSP allows exactly its own style sheet (the hash of the <style> text) and nothing else', () => {
    const html = renderManifestReport(folds);
    const style = /<style>([\s\S]*?)<\/style>/.exec(html)![1]!;
    const csp = /http-equiv="Content-Security-Policy" content="([^"]*)"/.exec(html)![1]!;
    const hash = createHash('sha256').update(style, 'utf8').digest('base64');
    expect(csp).toContain(`style-src 'sha256-${hash}'`);
    expect(csp).toMatch(/default-src 'none'/);
    expect(csp).toMatch(/script-src 'none'/);
    expect(html.match(/<style>/g)).toHaveLength(1);
  });

  it('references nothing outside itself: no script, link, image, font or address', () => {
    const html = renderManifestReport(folds);
    expect(html).not.toMatch(/<(script|link|img|iframe|object|embed|image|use)\b/i);
    expect(html).not.toMatch(/<[^>]*\s(src|href|xlink:href)=/i);
    expect(html).not.toMatch(/https?:|@import|@font-face|url\((?!#)/i);
    // Fills refer only to the page's own patterns.
    for (const ref of html.match(/url\(#([^)]*)\)/g) ?? []) expect(html).toContain(`id="${/#([^)]*)/.exec(ref)![1]}"`);
  });

  it('has a print style sheet that unrolls the scrolling tables', () => {
    const html = renderManifestReport(folds);
    expect(html).toMatch(/@media print \{[\s\S]*\.scroll \{ max-height: none; overflow: visible;/);
  });

  it('is the same page for the same manifest', () => {
    expect(renderManifestReport(many, { folder: 'x' })).toBe(renderManifestReport(many, { folder: 'x' }));
  });

  it('every chart has a title, a description and a role', () => {
    const html = renderManifestReport(folds);
    const charts = html.match(/<svg class="chart"[^>]*>/g)!;
    expect(charts.length).toBeGreaterThan(5);
    for (const c of charts) {
      expect(c).toMatch(/role="img"/);
      const [t, d] = /aria-labelledby="([^ "]+) ([^"]+)"/.exec(c)!.slice(1);
      expect(html).toContain(`<title id="${t}">`);
      expect(html).toContain(`<desc id="${d}">`);
    }
  });
});

describe('--exclude-values', () => {
  it('shows classes as "class N" and no value from the data', () => {
    const html = renderManifestReport(hidden);
    for (const n of [...NAMES, 'site-0', 'site-6']) expect(html).not.toContain(escapeText(n));
    expect(html).toContain('class 1');
    expect(html).toContain(`class ${hidden.strata.values.length}`);
    expect(buildReportModel(hidden).classes.map((c) => c.label)).toEqual(hidden.strata.values.map((_, i) => `class ${i + 1}`));
  });
});

describe('the deviations', () => {
  it('the largest the report finds is the one the engine recorded, in the same part and class', () => {
    for (const m of [folds, many]) {
      const model = buildReportModel(m);
      expect(model.worst!.deviation).toBeCloseTo(m.balance.maxDeviation, 12);
      const w = m.balance.worst!;
      // Ties: the engine and the report may name different units of the same deviation.
      const unit = [...model.parts, ...model.folds].find((u) => u.label === w.unit)!;
      expect(Math.abs(unit.deviation[w.stratum]!)).toBeCloseTo(m.balance.maxDeviation, 12);
    }
  });

  it('is signed: (share in the unit - overall share) / overall share', () => {
    // 30 of 100 against 20 of 100 overall: 50% over; 10 of 100: 50% under.
    expect(signedDeviation(30, 100, 200, 1000)).toBeCloseTo(0.5, 15);
    expect(signedDeviation(10, 100, 200, 1000)).toBeCloseTo(-0.5, 15);
    expect(signedDeviation(0, 0, 200, 1000)).toBe(0);
  });
});

describe('many classes and parts', () => {
  it('folds to the largest classes plus "other", always keeping the worst class', () => {
    const model = buildReportModel(many);
    const { shown, other } = chooseClasses(model.classes, 8);
    expect(shown).toHaveLength(7);
    expect(other).toHaveLength(33);
    expect(shown).toEqual([0, 1, 2, 3, 4, 5, 6]); // sizes fall with the index
    const kept = chooseClasses(model.classes, 8, 39);
    expect(kept.shown).toContain(39);
    expect(kept.shown).not.toContain(6);
    expect(chooseClasses(model.classes, 40).other).toEqual([]);
  });

  it('draws at most the units that stray most, in their own order', () => {
    const model = buildReportModel(many);
    const picked = chooseUnits(model.parts, 10);
    expect(picked).toHaveLength(10);
    const floor = Math.min(...picked.map((u) => u.worst));
    expect(model.parts.filter((u) => !picked.includes(u)).every((u) => u.worst <= floor)).toBe(true);
    expect(picked.map((u) => u.index)).toEqual([...picked.map((u) => u.index)].sort((a, b) => a - b));
  });

  it('the grid folds past 40 classes; the table keeps every class', () => {
    const html = renderManifestReport(many);
    for (let s = 0; s < 40; s++) expect(html).toContain(`data-s="class.${s}.name"`);
    for (let p = 0; p < 64; p++) expect(html).toContain(`data-k="part.${p}.dev.39"`);
  });
});

describe('figures', () => {
  it('writes signed percentages without a sign at zero, and round axis ends', () => {
    expect(formatSignedPercent(0.01666)).toBe('+1.67%');
    expect(formatSignedPercent(-0.0042)).toBe('\u22120.42%');
    expect(formatSignedPercent(-0.00001)).toBe('0.00%');
    expect(formatNumber(-2.5)).toBe('\u22122.5');
    expect([0.013, 0.02, 0.021, 0.3, 4, 7].map(niceCeil)).toEqual([0.02, 0.02, 0.05, 0.5, 5, 10]);
  });
});

describe('writeReport', () => {
  it('writes report.html whole, leaving no temporary file, and replaces an older one', async () => {
    const out = join(dir, 'folds');
    writeFileSync(join(out, 'report.html'), 'old');
    const r = await writeReport(out);
    expect(r.path).toBe(join(out, 'report.html'));
    expect(readFileSync(r.path, 'utf8')).toMatch(/^<!DOCTYPE html>[\s\S]*<\/html>\n$/);
    expect(readdirSync(out).filter((f) => f.endsWith('.tmp'))).toEqual([]);
    expect(r.verify).toBeNull();
  });

  it('a report that cannot be written is an RDK_IO naming the file, and leaves nothing behind', async () => {
    const out = join(dir, 'blocked');
    await runShuffle({ inputs: [join(dir, 'r.csv')], out, seed: 'render', threads: 0 });
    // A folder where the file should go: the rename fails.
    mkdirSync(join(out, 'report.html'));
    writeFileSync(join(out, 'report.html', 'keep'), 'x');
    const err = await writeReport(out).catch((e: unknown) => e);
    expect(err).toBeInstanceOf(RowdeckError);
    expect((err as RowdeckError).code).toBe('RDK_IO');
    expect((err as RowdeckError).message).toContain(join(out, 'report.html'));
    expect(readdirSync(out).filter((f) => f.endsWith('.tmp'))).toEqual([]);
    expect(existsSync(join(out, 'report.html', 'keep'))).toBe(true);
  });

  it('with verify, shows the outcome: passed, then failed once a part is changed', async () => {
    const out = join(dir, 'folds');
    const ok = await writeReport(out, { verify: true });
    expect(ok.verify!.ok).toBe(true);
    expect(readFileSync(ok.path, 'utf8')).toContain('<span class="big ok">passed</span>');
    const part = join(out, folds.output.parts[1]!.path);
    writeFileSync(part, readFileSync(part, 'utf8').replace(/\n[^\n]*\n$/, '\n'));
    const bad = await writeReport(out, { verify: true });
    expect(bad.verify!.ok).toBe(false);
    const html = readFileSync(bad.path, 'utf8');
    expect(html).toContain('<span class="big fail">failed</span>');
    expect(html).toContain(`data-s="verify.mismatch.0.file">${folds.output.parts[1]!.path}<`);
  });

  it('a folder without a manifest is RDK_MANIFEST, as for verify', async () => {
    const err = await writeReport(join(dir, 'nowhere')).catch((e: unknown) => e);
    expect((err as RowdeckError).code).toBe('RDK_MANIFEST');
  });
});
