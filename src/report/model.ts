/**
 * What the HTML report and the terminal summary show, worked out once from a manifest: class
 * names (never indexes), each part's and fold's class counts, and every signed deviation of a
 * class's share in a unit from its overall share. Pure: a manifest in, plain data out.
 *
 * A unit's deviation for class s is (n(u,s)/n(u) − N(s)/N) / (N(s)/N), the manifest's
 * `balance.maxDeviation` with its sign kept (positive: the class is over-represented in the unit).
 * Empty units have no shares and count as no deviation, as the manifest counts them.
 */
import { signedDeviation } from '../core/balance.js';
import { stratumLabel } from '../core/strata.js';
import type { Manifest } from '../engine/manifest.js';

export interface ClassInfo {
  /** Index into `strata.values` (and every `strata` array). */
  index: number;
  /** The class's name: its values joined with " · ", "(missing)" for a missing value; "class N" when values were left out. */
  label: string;
  records: number;
  /** records / all records. */
  share: number;
}

export interface UnitInfo {
  kind: 'part' | 'fold';
  /** Stable key for the page's number marks: `part.P` or `fold.S.K` (S: split number, K: fold). */
  key: string;
  /** The part's path, or `fold K` / `fold K of split NAME` as the manifest names folds. */
  label: string;
  /** Index into `output.parts` (parts), or the fold number (folds). */
  index: number;
  split: string | null;
  records: number;
  /** Records per class, aligned with `classes`. */
  strata: number[];
  /** Signed relative deviation per class (0 for an empty unit or an empty class). */
  deviation: number[];
  /** Largest |deviation| in this unit, and its class (-1 when every share is exact). */
  worst: number;
  worstClass: number;
}

export interface ReportModel {
  stratified: boolean;
  /** Stratify columns, joined with " × " (for headings). */
  classColumns: string;
  classes: ClassInfo[];
  total: number;
  parts: UnitInfo[];
  folds: UnitInfo[];
  /** Names of the splits in order, or [] without named splits. */
  splits: string[];
  /** The largest |deviation| over all units, where it is; null when every share is exact. */
  worst: { unit: UnitInfo; classIndex: number; deviation: number } | null;
}

/** Label of class `s` of a manifest (core/strata.ts: stratumLabel). */
export function classLabel(m: Manifest, s: number): string {
  return stratumLabel(m.strata.values[s]?.value ?? null, s);
}

export { signedDeviation };

function makeUnit(kind: 'part' | 'fold', key: string, label: string, index: number, split: string | null, strata: number[], classes: ClassInfo[], total: number): UnitInfo {
  const records = strata.reduce((a, b) => a + b, 0);
  const deviation = strata.map((n, s) => signedDeviation(n, records, classes[s]!.records, total));
  let worst = 0;
  let worstClass = -1;
  deviation.forEach((d, s) => {
    if (Math.abs(d) > worst) {
      worst = Math.abs(d);
      worstClass = s;
    }
  });
  return { kind, key, label, index, split, records, strata, deviation, worst, worstClass };
}

export function buildReportModel(m: Manifest): ReportModel {
  const total = m.input.records;
  const classes: ClassInfo[] = m.strata.values.map((v, s) => ({ index: s, label: classLabel(m, s), records: v.records, share: total > 0 ? v.records / total : 0 }));
  const parts = m.output.parts.map((p, i) => makeUnit('part', `part.${i}`, p.path, i, p.split, p.strata, classes, total));
  const splits = m.options.split ? (m.options.split as { name: string }[]).map((s) => s.name) : [];
  const folds: UnitInfo[] = [];
  const K = typeof m.options.folds === 'number' ? m.options.folds : 1;
  if (K > 1) {
    const groups = splits.length > 0 ? splits : [null];
    groups.forEach((split, si) => {
      for (let k = 0; k < K; k++) {
        const strata = new Array<number>(classes.length).fill(0);
        for (const p of m.output.parts) {
          if (p.split !== split || !p.foldStrata) continue;
          p.foldStrata[k]!.forEach((n, s) => (strata[s]! += n));
        }
        const label = `fold ${k}${split !== null ? ` of split ${split}` : ''}`;
        folds.push(makeUnit('fold', `fold.${si}.${k}`, label, k, split, strata, classes, total));
      }
    });
  }
  let worst: ReportModel['worst'] = null;
  for (const u of [...parts, ...folds]) {
    if (u.worstClass >= 0 && (worst === null || u.worst > worst.deviation)) worst = { unit: u, classIndex: u.worstClass, deviation: u.worst };
  }
  return {
    stratified: m.strata.columns.length > 0,
    classColumns: m.strata.columns.join(' × '),
    classes,
    total,
    parts,
    folds,
    splits,
    worst,
  };
}

/**
 * Which classes to show one by one when there is room for `room` columns: all of them when they
 * fit, else the largest `room - 1` (ties: the earlier class) and an "other" column for the rest.
 * `keep` (the class of the largest deviation, say) is shown in any case, in place of the smallest
 * of the largest. Returned in the manifest's order.
 */
export function chooseClasses(classes: ClassInfo[], room: number, keep?: number): { shown: number[]; other: number[] } {
  if (classes.length <= room) return { shown: classes.map((c) => c.index), other: [] };
  const n = Math.max(1, room - 1);
  const bySize = [...classes].sort((a, b) => b.records - a.records || a.index - b.index).slice(0, n);
  const picked = new Set(bySize.map((c) => c.index));
  if (keep !== undefined && keep >= 0 && keep < classes.length && !picked.has(keep)) {
    picked.delete(bySize[bySize.length - 1]!.index);
    picked.add(keep);
  }
  return { shown: classes.filter((c) => picked.has(c.index)).map((c) => c.index), other: classes.filter((c) => !picked.has(c.index)).map((c) => c.index) };
}

/**
 * Which units to show when there is room for `room`: all when they fit, else the `room` with the
 * largest deviation (ties: the earlier unit), in their own order.
 */
export function chooseUnits(units: UnitInfo[], room: number): UnitInfo[] {
  if (units.length <= room) return units;
  const picked = new Set([...units].map((u, i) => ({ u, i })).sort((a, b) => b.u.worst - a.u.worst || a.i - b.i).slice(0, room).map((x) => x.u));
  return units.filter((u) => picked.has(u));
}

/** A unit's records in the classes of `other`, and that sum's signed deviation. */
export function otherOf(unit: UnitInfo, other: number[], classes: ClassInfo[], total: number): { records: number; deviation: number } {
  const n = other.reduce((a, s) => a + unit.strata[s]!, 0);
  const all = other.reduce((a, s) => a + classes[s]!.records, 0);
  return { records: n, deviation: signedDeviation(n, unit.records, all, total) };
}
