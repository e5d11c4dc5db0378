/**
 * The checks that need no inputs: each part against its manifest entry (size, sha256, header,
 * records, classes, folds, fingerprint, statistics, order), files that look like parts but are
 * not listed, rejected.csv, the manifest's own totals, and the balance promise recomputed. Each
 * step takes what was read and returns its Findings.
 */
import { readdirSync, type Dirent } from 'node:fs';
import { join, normalize } from 'node:path';
import { withinTolerance, balanceOfUnits } from '../../core/balance.js';
import { Fingerprint } from '../../core/hash.js';
import type { ColumnSummary } from '../../core/stats.js';
import type { Manifest, PartRecord } from '../manifest.js';
import { countRejects, type PartScan } from './part-scan.js';
import type { ReadPlan } from './read-plan.js';
import { Findings, same, type Mismatch } from './report.js';
import type { PartsRead } from './scan-parts.js';

/** The manifest itself, as a file name in checks. */
export const MANIFEST_FILE = 'manifest.json';

/** What the parts hold together, as read. */
export interface OutputRead {
  /** Every part present and read to its end. */
  allRead: boolean;
  /** Records read from all parts. */
  records: number;
  /** The fingerprint of every record read, as hex. */
  fingerprint: string;
}

export function summarizeOutput(scans: PartScan[]): OutputRead {
  const fp = new Fingerprint();
  for (const s of scans) fp.merge(s.fingerprint.toJSON());
  return { allRead: scans.every((s) => s.present && s.readError === null), records: sum(scans.map((s) => s.records)), fingerprint: fp.toHex() };
}

/** Each part against its entry in the manifest. */
export function checkParts(m: Manifest, plan: ReadPlan, scans: PartScan[]): Findings {
  const out = new Findings();
  const valuesOut = plan.strataIndex === null;
  m.output.parts.forEach((p, k) => {
    const s = scans[k]!;
    const f = p.path;
    if (!out.judge(f, 'present', s.present ? [] : [{ expected: 'a file', found: 'missing' }])) {
      for (const c of partCheckNames(plan)) out.skip(f, c, 'the file is missing');
      return;
    }
    if (s.sha256 === '') {
      // Could not be read at all (permissions, an I/O error): 'readable' says why.
      out.skip(f, 'bytes', 'the file could not be read');
      out.skip(f, 'sha256', 'the file could not be read');
    } else {
      out.judge(f, 'bytes', same(p.bytes, s.bytes));
      out.judge(f, 'sha256', same(p.sha256, s.sha256));
    }
    out.judge(f, 'readable', s.readError === null ? [] : [{ expected: 'records the reader accepts', found: s.readError }]);
    if (plan.format !== 'jsonl' && plan.header) {
      const want = [...plan.columns, ...(plan.foldColumn !== null ? [plan.foldColumn] : [])];
      if (s.columns === null) out.skip(f, 'header', 'no header could be read');
      else out.judge(f, 'header', same(JSON.stringify(want), JSON.stringify(s.columns)));
    }
    if (s.readError !== null) {
      for (const c of partCheckNames(plan).filter((c) => c !== 'header')) out.skip(f, c, 'the file could not be read to its end');
      return;
    }
    out.judge(f, 'records', same(p.records, s.records));
    if (valuesOut) out.skip(f, 'strata', 'the manifest was written without data values (excludeValues)');
    else {
      const bad: Mismatch[] = [];
      for (let i = 0; i < plan.strataCount; i++) {
        if (p.strata[i] !== s.strata[i]) bad.push({ item: plan.strataLabels[i]!, expected: p.strata[i] ?? 'no entry', found: s.strata[i]! });
      }
      if (p.strata.length !== plan.strataCount) bad.push({ item: 'entries', expected: plan.strataCount, found: p.strata.length });
      for (const [label, u] of s.unknown) bad.push({ item: label, line: u.line, expected: 0, found: u.count });
      out.judge(f, 'strata', bad);
    }
    if (plan.folds > 1) {
      out.judge(f, 'fold values', s.badFold === null ? [] : [{ line: s.badFold.line, expected: `a fold column with values 0..${plan.folds - 1}`, found: `${s.badFold.text} (${s.badFold.count} record${s.badFold.count === 1 ? '' : 's'})` }]);
      const bad: Mismatch[] = [];
      for (let g = 0; g < plan.folds; g++) {
        if (p.folds?.[g] !== s.folds[g]) bad.push({ item: `fold ${g}`, expected: p.folds?.[g] ?? 'no entry', found: s.folds[g]! });
      }
      out.judge(f, 'folds', bad);
      if (valuesOut) out.skip(f, 'fold strata', 'the manifest was written without data values (excludeValues)');
      else {
        const badFs: Mismatch[] = [];
        for (let g = 0; g < plan.folds; g++) {
          for (let i = 0; i < plan.strataCount; i++) {
            const want = p.foldStrata?.[g]?.[i];
            const got = s.foldStrata[g * plan.strataCount + i]!;
            if (want !== got) badFs.push({ item: `fold ${g}, ${plan.strataLabels[i]}`, expected: want ?? 'no entry', found: got });
          }
        }
        out.judge(f, 'fold strata', badFs);
      }
    }
    out.judge(f, 'fingerprint', same(p.fingerprint, s.fingerprint.toHex()));
    if (s.stats) out.judge(f, 'statistics', compareStats(p.stats, s.stats));
    checkOrder(out, plan, f, s);
  });
  return out;
}

/** The order inside a part: what can be checked of the promise without the inputs. */
function checkOrder(out: Findings, plan: ReadPlan, f: string, s: PartScan): void {
  const o = plan.order;
  if (o === 'interleaved') out.skip(f, 'order', 'dealing scheme 1 (rowdeck 0.1): classes evenly interleaved inside the part, not shuffled; shuffle again for a random order');
  // A random order has no pattern to check: nothing is listed for it.
  else if (o === 'random') return;
  else if (o === 'spread' && plan.strataIndex === null) out.skip(f, 'order', 'spread: the manifest was written without data values (excludeValues)');
  else out.judge(f, 'order', s.orderBreak === null ? [] : [s.orderBreak], o === 'spread' ? 'spread: every record of a class within one of its share of the positions so far' : 'grouped: each group in one run');
}

/** Files that look like parts but are not listed (a stray or planted part). */
export function checkUnlisted(dir: string, m: Manifest): Findings {
  const out = new Findings();
  for (const f of findUnlistedParts(dir, m)) {
    out.judge(f, 'listed', [{ expected: 'no such file (the manifest does not list it)', found: 'a file that looks like a part' }]);
  }
  return out;
}

/** Rejected records, kept aside by --on-bad-record quarantine. */
export async function checkRejects(dir: string, m: Manifest): Promise<Findings> {
  const out = new Findings();
  if (m.input.rejectsFile !== null) {
    const f = m.input.rejectsFile;
    const n = await countRejects(join(dir, f));
    if (out.judge(f, 'present', n === null ? [{ expected: 'a file', found: 'missing' }] : [])) out.judge(f, 'records', same(m.input.rejected, n!));
    else out.skip(f, 'records', 'the file is missing');
  }
  return out;
}

/** The manifest's own totals, and the whole output against them. */
export function checkTotals(m: Manifest, plan: ReadPlan, read: PartsRead, output: OutputRead): Findings {
  const out = new Findings();
  const M = MANIFEST_FILE;
  const parts = m.output.parts;
  const { allRead } = output;
  out.judge(M, 'output records', [
    ...same(m.input.records, m.output.records),
    ...(m.output.records === sum(parts.map((p) => p.records)) ? [] : [{ item: 'sum of parts', expected: m.output.records, found: sum(parts.map((p) => p.records)) }]),
    ...(allRead && output.records !== m.output.records ? [{ item: 'records read', expected: m.output.records, found: output.records }] : []),
  ]);
  if (allRead) out.judge(M, 'output fingerprint', same(m.output.fingerprint, output.fingerprint));
  else out.skip(M, 'output fingerprint', 'some parts are missing or could not be read');
  out.judge(M, 'input fingerprint', same(m.input.fingerprint, m.output.fingerprint));
  {
    const bad: Mismatch[] = [];
    const totals = new Float64Array(plan.strataCount);
    for (const p of parts) for (let i = 0; i < plan.strataCount; i++) totals[i]! += p.strata[i] ?? 0;
    m.strata.values.forEach((v, i) => {
      if (v.records !== totals[i]) bad.push({ item: `${plan.strataLabels[i]} (sum of parts)`, expected: v.records, found: totals[i]! });
    });
    if (sum(m.strata.values.map((v) => v.records)) !== m.input.records) bad.push({ item: 'sum of classes', expected: m.input.records, found: sum(m.strata.values.map((v) => v.records)) });
    out.judge(M, 'strata totals', bad);
  }
  // The whole input's statistics are the parts' merged (exact, as the run made them).
  if (plan.statsColumns !== null) {
    if (allRead && read.wholeStats) {
      out.judge(M, 'input statistics', compareStats(m.input.stats, read.wholeStats.summary({ excludeValues: plan.excludeValues })), 'merged from the parts read');
    } else out.skip(M, 'input statistics', 'some parts are missing or could not be read');
  }
  return out;
}

/** The balance promise, recomputed from the counts (those read where every part was read, else the manifest's). */
export function checkBalance(m: Manifest, plan: ReadPlan, scans: PartScan[], output: OutputRead): Findings {
  const out = new Findings();
  const M = MANIFEST_FILE;
  const parts = m.output.parts;
  const fromFiles = output.allRead && plan.strataIndex !== null;
  const partStrata = parts.map((p, k) => (fromFiles ? Array.from(scans[k]!.strata) : p.strata));
  const foldStrata = parts.map((p, k) => (fromFiles ? Array.from({ length: plan.folds }, (_, g) => Array.from(scans[k]!.foldStrata.subarray(g * plan.strataCount, (g + 1) * plan.strataCount))) : (p.foldStrata ?? [])));
  const dev = computeMaxDeviation(parts, partStrata, foldStrata, plan);
  const note = fromFiles ? 'from the counts read from the files' : "from the manifest's counts";
  out.judge(M, 'balance', Math.abs(dev - m.balance.maxDeviation) <= 1e-12 ? [] : [{ item: 'maxDeviation', expected: m.balance.maxDeviation, found: dev }], note);
  // Hash assignment promises no tolerance: its shares are what the keys give.
  if ((m.options as { assign?: string }).assign === 'hash') out.skip(M, 'tolerance', 'not enforced with assign "hash": the class shares are reported, not kept within a tolerance');
  else out.judge(M, 'tolerance', withinTolerance(dev, m.balance.tolerance) ? [] : [{ item: 'maxDeviation', expected: `<= ${m.balance.tolerance}`, found: dev }], note);
  return out;
}

/**
 * Files in the folder (and its split folders) named like parts (.csv, .tsv, .jsonl …, optionally
 * .gz) that the manifest does not list; hidden entries (rowdeck's work folders) aside.
 */
function findUnlistedParts(dir: string, m: Manifest): string[] {
  const listed = new Set(m.output.parts.map((p) => normalize(p.path)));
  if (m.input.rejectsFile !== null) listed.add(normalize(m.input.rejectsFile));
  const partLike = /\.(?:csv|tsv|tab|jsonl|ndjson)(?:\.gz)?$/i;
  const found: string[] = [];
  const walk = (rel: string, depth: number): void => {
    let entries: Dirent[];
    try {
      entries = readdirSync(rel === '' ? dir : join(dir, rel), { withFileTypes: true });
    } catch {
      return;
    }
    for (const e of entries) {
      if (e.name.startsWith('.')) continue;
      const r = rel === '' ? e.name : join(rel, e.name);
      if (e.isDirectory() && depth < 3) walk(r, depth + 1);
      else if (e.isFile() && partLike.test(e.name) && !listed.has(r)) found.push(r);
    }
  };
  walk('', 0);
  return found.sort();
}

function sum(xs: number[]): number {
  let s = 0;
  for (const x of xs) s += x;
  return s;
}

/** Checks done per part after presence and size (for the "skipped" entries). */
export function partCheckNames(plan: ReadPlan): string[] {
  return [
    'bytes',
    'sha256',
    'readable',
    ...(plan.format !== 'jsonl' && plan.header ? ['header'] : []),
    'records',
    'strata',
    ...(plan.folds > 1 ? ['fold values', 'folds', 'fold strata'] : []),
    'fingerprint',
    ...(plan.statsColumns !== null ? ['statistics'] : []),
    ...(plan.order !== 'random' ? ['order'] : []),
  ];
}

/**
 * A manifest's column statistics against those computed from the files: one mismatch a column
 * that differs, naming the first figure that does (as JSON, cut short).
 */
function compareStats(expected: unknown, found: ColumnSummary[]): Mismatch[] {
  if (!Array.isArray(expected)) return [{ expected: 'column statistics', found: expected === undefined ? 'none' : JSON.stringify(expected).slice(0, 80) }];
  const bad: Mismatch[] = [];
  if (expected.length !== found.length) bad.push({ item: 'columns', expected: expected.length, found: found.length });
  const text = (v: unknown): string => {
    const t = JSON.stringify(v) ?? 'none';
    return t.length > 80 ? `${t.slice(0, 77)}...` : t;
  };
  found.forEach((c, i) => {
    const e = expected[i] as Record<string, unknown> | undefined;
    if (e === undefined || JSON.stringify(e) === JSON.stringify(c)) return;
    const got: Record<string, unknown> = { ...c };
    const key = [...new Set([...Object.keys(e), ...Object.keys(got)])].find((k) => JSON.stringify(e[k]) !== JSON.stringify(got[k])) ?? 'order of figures';
    bad.push({ item: `${c.name}: ${key}`, expected: text(e[key]), found: text(got[key]) });
  });
  return bad;
}

/**
 * Largest relative deviation of a class's share, over parts and over each split's folds, the
 * measure the shuffle promised to keep within its tolerance (see core/balance.ts).
 */
function computeMaxDeviation(parts: PartRecord[], partStrata: number[][], foldStrata: number[][][], plan: ReadPlan): number {
  const S = plan.strataCount;
  const P = parts.length;
  const partCounts = new Float64Array(P * S);
  const totals = new Float64Array(S);
  partStrata.forEach((row, p) => {
    for (let s = 0; s < S; s++) {
      partCounts[p * S + s] = row[s] ?? 0;
      totals[s]! += row[s] ?? 0;
    }
  });
  const K = plan.folds;
  let folds: Float64Array | null = null;
  let units = 0;
  if (K > 1) {
    // Folds are compared within each split: the split's partitions together.
    const splitOf = new Map<string | null, number>();
    for (const p of parts) if (!splitOf.has(p.split)) splitOf.set(p.split, splitOf.size);
    units = splitOf.size * K;
    const counts = new Float64Array(units * S);
    parts.forEach((p, k) => {
      const base = splitOf.get(p.split)! * K;
      for (let g = 0; g < K; g++) for (let s = 0; s < S; s++) counts[(base + g) * S + s]! += foldStrata[k]?.[g]?.[s] ?? 0;
    });
    folds = counts;
  }
  return balanceOfUnits(partCounts, P, folds, units, totals).deviation;
}
