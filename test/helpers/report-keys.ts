/**
 * What each mark on a report page must show, worked out here from the manifest (or the profile,
 * or the verify report) on its own, without the report's code: so a page that shows a wrong
 * figure, a class under another's name or an index instead of a name fails the test. The keys
 * are described in src/report/html.ts and profile-html.ts.
 *
 * checkMarks() reads a page's DOM (as the browser built it) and compares every marked figure and
 * text; it also checks that no digit appears in the page's text outside a mark, so every number
 * shown is one that was checked.
 */
import type { Manifest } from '../../src/engine/manifest.js';
import type { Profile } from '../../src/engine/profile.js';
import type { VerifyReport } from '../../src/engine/verify.js';
import type { ColumnSummary } from '../../src/core/stats.js';
import { elements, hasAncestor, textNodes, textOf, type DomElement } from './dom.js';

export interface PageData {
  manifest?: Manifest;
  profile?: Profile;
  verify?: VerifyReport | null;
  folder?: string;
}

type Strata = number[];

function sum(a: number[]): number {
  return a.reduce((x, y) => x + y, 0);
}

function classList(s: string): number[] {
  return s.split(',').map(Number);
}

/** A class's name as the manifest gives it. */
export function manifestClassName(m: Manifest, s: number): string {
  const v = m.strata.values[s]!;
  if (v.value === null) return `class ${s + 1}`;
  if (m.strata.columns.length === 0) return 'all records';
  return v.value.map((x) => (x === null ? '(missing)' : x)).join(' · ');
}

function splitNames(m: Manifest): (string | null)[] {
  return m.options.split ? (m.options.split as { name: string }[]).map((s) => s.name) : [null];
}

/** A unit of a manifest page: `whole`, `part.P` or `fold.S.K`; returns the rest of the key too. */
function unitOf(m: Manifest, parts: string[]): { name: string; strata: Strata; records: number; split: string | null; rest: string[]; part: number | null } | null {
  const total = m.input.records;
  if (parts[0] === 'whole') return { name: 'whole input', strata: m.strata.values.map((v) => v.records), records: total, split: null, rest: parts.slice(1), part: null };
  if (parts[0] === 'part') {
    const p = m.output.parts[Number(parts[1])]!;
    return { name: p.path, strata: p.strata, records: p.records, split: p.split, rest: parts.slice(2), part: Number(parts[1]) };
  }
  if (parts[0] === 'fold' && parts[1] !== 'label') {
    const split = splitNames(m)[Number(parts[1])]!;
    const k = Number(parts[2]);
    const strata = m.strata.values.map(() => 0);
    for (const p of m.output.parts) if (p.split === split) p.foldStrata![k]!.forEach((n, s) => (strata[s]! += n));
    return { name: `fold ${k}${split !== null ? ` of split ${split}` : ''}`, strata, records: sum(strata), split, rest: parts.slice(3), part: null };
  }
  return null;
}

function deviation(n: number, unit: number, cls: number, total: number): number {
  if (unit <= 0 || cls <= 0) return 0;
  return (n / unit - cls / total) / (cls / total);
}

function statFigure(c: ColumnSummary, field: string): number | string {
  const v = (c as unknown as Record<string, unknown>)[field];
  if (typeof v === 'number' || typeof v === 'string') return v;
  throw new Error(`no ${field} in ${c.name}`);
}

/** The figure or text a manifest page's key names. */
export function manifestValue(key: string, d: PageData, asText: boolean): number | string {
  const m = d.manifest!;
  const k = key.split('.');
  const total = m.input.records;
  const unit = unitOf(m, k);
  if (unit && !(k[0] === 'whole' && (k[1] === 'col' || k[1] === 'stat'))) {
    const [field, arg, sub] = unit.rest;
    if (field === 'name') return unit.name;
    if (field === 'records') return unit.records;
    if (field === 'class' || field === 'cshare' || field === 'dev') {
      const cls = classList(arg!);
      const n = sum(cls.map((s) => unit.strata[s]!));
      if (field === 'class') return n;
      if (field === 'cshare') return unit.records > 0 ? n / unit.records : 0;
      return deviation(n, unit.records, sum(cls.map((s) => m.strata.values[s]!.records)), total);
    }
    if (field === 'share') return unit.records / total;
    if (field === 'split') return m.output.parts[unit.part!]!.split ?? '';
    if (field === 'bytes') return m.output.parts[unit.part!]!.bytes;
    if (field === 'sha256') return m.output.parts[unit.part!]!.sha256;
    if (field === 'fingerprint') return m.output.parts[unit.part!]!.fingerprint;
    if (field === 'fold') return m.output.parts[unit.part!]!.folds![Number(arg)]!;
    if (field === 'splitshare') {
      const inSplit = sum(m.output.parts.filter((p) => p.split === unit.split).map((p) => p.records));
      return unit.records / inSplit;
    }
    if (field === 'stat') {
      const c = (m.output.parts[unit.part!]!.stats as ColumnSummary[])[Number(arg)]!;
      return statFigure(c, sub!);
    }
    throw new Error(`unknown unit field in ${key}`);
  }
  const worstDev = (): number => {
    let best = 0;
    const units: Strata[] = [...m.output.parts.map((p) => p.strata)];
    splitNames(m).forEach((_, si) => {
      for (let f = 0; f < (m.options.folds as number); f++) if ((m.options.folds as number) > 1) units.push(unitOf(m, ['fold', String(si), String(f)])!.strata);
    });
    let signed = 0;
    for (const u of units) {
      const r = sum(u);
      u.forEach((n, s) => {
        const dv = deviation(n, r, m.strata.values[s]!.records, total);
        if (Math.abs(dv) > best) {
          best = Math.abs(dv);
          signed = dv;
        }
      });
    }
    return signed;
  };
  switch (k[0]) {
    case 'folder':
      return d.folder!;
    case 'seed':
      return m.seed ?? '';
    case 'tool':
      return m.tool.version;
    case 'run':
      return k[1] === 'createdAt' ? m.run.createdAt : k[1] === 'threads' ? m.run.threads : m.run.buckets;
    case 'inputs':
      return m.input.files.length;
    case 'parts': {
      const sizes = m.output.parts.map((p) => p.records);
      if (k[1] === 'count') return m.output.parts.length;
      if (k[1] === 'minRecords') return Math.min(...sizes);
      if (k[1] === 'maxRecords') return Math.max(...sizes);
      if (k[1] === 'empty') return sizes.filter((n) => n === 0).length;
      break;
    }
    case 'classes':
      return m.strata.values.length;
    case 'splits':
      return splitNames(m).length;
    case 'strata':
      return m.strata.columns.join(' × ');
    case 'group':
      return String(m.options.group);
    case 'option':
      return asText ? JSON.stringify(m.options[k[1]!]) : (m.options[k[1]!] as number);
    case 'input':
      if (k[1] === 'records') return m.input.records;
      if (k[1] === 'rejected') return m.input.rejected;
      if (k[1] === 'rejectsFile') return m.input.rejectsFile ?? '';
      {
        const f = m.input.files[Number(k[1])]!;
        return (f as unknown as Record<string, number | string>)[k[2]!]!;
      }
    case 'output':
      return m.output.records;
    case 'fingerprint':
      return k[1] === 'in' ? m.input.fingerprint : m.output.fingerprint;
    case 'balance':
      return k[1] === 'maxDeviation' ? m.balance.maxDeviation : m.balance.tolerance;
    case 'worst':
      if (k[1] === 'class') return manifestClassName(m, m.balance.worst!.stratum);
      if (k[1] === 'unit') return m.balance.worst!.unit;
      if (k[1] === 'size') return Math.abs(worstDev());
      return worstDev();
    case 'class':
      if (k[2] === 'name') return manifestClassName(m, Number(k[1]));
      if (k[2] === 'count') return classList(k[1]!).length;
      break;
    case 'split': {
      const splits = m.options.split as { name: string; weight: number }[];
      const s = splits[Number(k[1])]!;
      const records = sum(m.output.parts.filter((p) => p.split === s.name).map((p) => p.records));
      if (k[2] === 'name') return s.name;
      if (k[2] === 'weight') return s.weight;
      if (k[2] === 'asked') return s.weight / sum(splits.map((x) => x.weight));
      if (k[2] === 'records') return records;
      if (k[2] === 'share') return records / total;
      break;
    }
    case 'bins': {
      const b = m.strata.bins[Number(k[1])]!;
      if (k[2] === 'edge') return b.edges[Number(k[3])]!;
      return (b as unknown as Record<string, number | string>)[k[2]!]!;
    }
    case 'whole': {
      const c = (m.input.stats as ColumnSummary[])[Number(k[2])]!;
      return statFigure(c, k[3]!);
    }
    case 'fold':
      if (k[1] === 'label') return Number(k[2]);
      break;
    case 'verify':
      return verifyValue(k, d.verify!);
  }
  throw new Error(`unknown key ${key}`);
}

function verifyValue(k: string[], v: VerifyReport): number | string {
  const count = (status: string): number => v.checks.filter((c) => c.status === status).length;
  if (k[1] === 'passed' || k[1] === 'failed' || k[1] === 'skipped') return count(k[1]);
  if (k[1] === 'mismatches') return v.mismatches.length;
  if (k[1] === 'records') return v.records;
  if (k[1] === 'parts') return v.parts;
  if (k[1] === 'against') return v.against!.inputs[Number(k[2])]!;
  if (k[1] === 'mismatch') return String((v.mismatches[Number(k[2])] as unknown as Record<string, string | number>)[k[3]!]);
  if (k[1] === 'group') {
    // Groups of checks by (check, outcome), in the order the checks were made.
    const groups: { id: string; files: string[]; notes: string[] }[] = [];
    for (const c of v.checks) {
      const id = `${c.check}/${c.status}`;
      let g = groups.find((x) => x.id === id);
      if (!g) groups.push((g = { id, files: [], notes: [] }));
      if (!g.files.includes(c.file)) g.files.push(c.file);
      if (c.note !== undefined && !g.notes.includes(c.note)) g.notes.push(c.note);
    }
    const g = groups[Number(k[2])]!;
    if (k[3] === 'files') return g.files.length;
    if (k[3] === 'file') return g.files[Number(k[4])]!;
    if (k[3] === 'note') return g.notes[Number(k[4])]!;
  }
  throw new Error(`unknown verify key ${k.join('.')}`);
}

function profileClassName(c: { value: (string | null)[] | null }, i: number): string {
  if (c.value === null) return `class ${i + 1}`;
  return c.value.map((x) => (x === null ? '(missing)' : x)).join(' · ');
}

/** The figure or text a profile page's key names. */
export function profileValue(key: string, d: PageData): number | string {
  const p = d.profile!;
  const k = key.split('.');
  switch (k[0]) {
    case 'records':
      return p.records;
    case 'rejected':
      return p.rejected;
    case 'tool':
      return p.tool.version;
    case 'inputs':
      return p.inputs.length;
    case 'columns':
      return k[1] === 'count' ? p.columns.length : p.columns.filter((c) => c.missing > 0).length;
    case 'strata':
      return k[1] === 'count' ? p.strata!.values.length : p.strata!.columns.join(' × ');
    case 'warnings':
      return p.warnings.length;
    case 'warning':
      return p.warnings[Number(k[1])]!.message;
    case 'plan':
      return (p.plan as unknown as Record<string, number>)[k[1]!]!;
    case 'input':
      return (p.inputs[Number(k[1])] as unknown as Record<string, number | string>)[k[2]!]!;
    case 'reject':
      return (p.rejects[Number(k[1])] as unknown as Record<string, number | string>)[k[2]!]!;
    case 'col': {
      const c = p.columns[Number(k[1])]!;
      if (k[2] === 'missingShare') return c.missing / p.records;
      if (k[2] === 'top') {
        const t = c.top![Number(k[3])]!;
        return k[4] === 'value' ? t.value : t.count / c.count;
      }
      return statFigure(c, k[2]!);
    }
    case 'byclass': {
      const col = p.strata!.byColumn[Number(k[1])]!;
      if (k[2] === 'column') return col.column;
      if (k[2] === 'count' && k.length === 3) return col.values.length;
      const cls = classList(k[2]!);
      if (k[3] === 'name') return profileClassName(col.values[cls[0]!]!, cls[0]!);
      const n = sum(cls.map((i) => col.values[i]!.count));
      return k[3] === 'count' ? n : n / p.records;
    }
    case 'stratum': {
      const c = p.strata!.values[Number(k[1])]!;
      return k[2] === 'name' ? profileClassName(c, Number(k[1])) : k[2] === 'count' ? c.count : c.share;
    }
    case 'bins': {
      const b = p.strata!.bins[Number(k[1])]!;
      if (k[2] === 'edge') return b.edges[Number(k[3])]!;
      return (b as unknown as Record<string, number | string>)[k[2]!]!;
    }
  }
  throw new Error(`unknown profile key ${key}`);
}

const NUMBER = /[+\-\u2212]?\d[\d,]*(?:\.\d+)?(?:e[+-]?\d+)?%?/g;

/** A number as the page writes it, and how far from the true value its rounding may be. */
export function readNumber(token: string): { value: number; slack: number } {
  const pct = token.endsWith('%');
  let t = token.replace(/%$/, '').replace(/,/g, '').replace('\u2212', '-');
  const m = /^([+-]?)(\d+)(?:\.(\d+))?(?:e([+-]?\d+))?$/.exec(t);
  if (!m) throw new Error(`not a number: ${token}`);
  t = t.replace(/^\+/, '');
  const decimals = (m[3] ?? '').length;
  const exp = m[4] ? Number(m[4]) : 0;
  const scale = pct ? 0.01 : 1;
  return { value: Number(t) * scale, slack: 0.5 * 10 ** (exp - decimals) * scale * (1 + 1e-9) + 1e-15 };
}

export interface MarkCheck {
  figures: number;
  texts: number;
  /** Every key seen, for tests that want to know a figure was shown at all. */
  keys: Set<string>;
}

/**
 * Checks every mark in the page's body against `value(key, asText)`, and that no digit stands
 * outside a mark (or a `.lbl` / `.axis` label of the page's own: a heading such as "sha256", an
 * axis end). Throws with every problem found.
 */
export function checkMarks(body: DomElement, value: (key: string, asText: boolean) => number | string): MarkCheck {
  const problems: string[] = [];
  const result: MarkCheck = { figures: 0, texts: 0, keys: new Set() };
  for (const e of elements(body)) {
    const fk = e.attrs.get('data-k');
    const sk = e.attrs.get('data-s');
    const tk = e.attrs.get('data-t');
    if (fk !== undefined) {
      const keys = fk.split(' ');
      const text = textOf(e);
      const tokens = text.match(NUMBER) ?? [];
      keys.forEach((key, i) => {
        result.keys.add(key);
        const token = tokens[i];
        if (token === undefined) return void problems.push(`${key}: no number in "${text}"`);
        let want: number;
        try {
          want = value(key, false) as number;
        } catch (err) {
          return void problems.push(String(err));
        }
        const got = readNumber(token);
        if (typeof want !== 'number' || !(Math.abs(got.value - want) <= got.slack)) problems.push(`${key}: shows ${token} in "${text}", the data says ${want}`);
        result.figures++;
      });
    }
    for (const [key, whole] of [
      [sk, true],
      [tk, false],
    ] as const) {
      if (key === undefined) continue;
      result.keys.add(key);
      // A cut label keeps its whole text in a <title> child: compare the label's own text.
      const own = e.children.filter((c) => typeof c === 'string').join('');
      let want: string;
      try {
        want = String(value(key, true));
      } catch (err) {
        problems.push(String(err));
        continue;
      }
      if (whole ? own !== want : !(own.endsWith('…') && want.startsWith(own.slice(0, -1)) && own.length > 1)) problems.push(`${key}: shows "${own}", the data says "${want}"`);
      result.texts++;
    }
  }
  for (const { text, parent } of textNodes(body)) {
    if (!/\d/.test(text)) continue;
    if (hasAncestor(parent, (x) => x.attrs.has('data-k') || x.attrs.has('data-s') || x.attrs.has('data-t') || /\b(lbl|axis)\b/.test(x.attrs.get('class') ?? '') || x.tag === 'style')) continue;
    problems.push(`a number outside any mark: "${text.trim().slice(0, 120)}" in <${parent.tag}>`);
  }
  if (problems.length > 0) throw new Error(`${problems.length} problem(s) on the page:\n${problems.slice(0, 40).join('\n')}`);
  return result;
}
