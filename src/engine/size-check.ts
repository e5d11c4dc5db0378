/**
 * Part and fold sizes against their targets where whole groups are dealt (`group`): the class
 * shares are kept within the tolerance, but the sizes follow the groups, and too few or too
 * uneven groups leave parts far from their size, or empty. Nothing is refused for it (the run is
 * still correct); the caller is warned, before anything is written, with the sizes achieved.
 */
import type { DealSpec } from '../core/deal.js';

export interface UnitSize {
  label: string;
  records: number;
  target: number;
}

/**
 * Sizes of every part and of every fold of every split, from the records per cell (`cells[c]`,
 * cells in dealing order: split, partition, fold), with their targets: a split's share of the
 * records over its partitions (folds: over its folds).
 */
export function unitSizes(cells: ArrayLike<number>, deal: DealSpec, partPaths: readonly string[]): { parts: UnitSize[]; folds: UnitSize[] } {
  const K = deal.folds;
  const P = deal.partitions;
  const records = Array.from(cells).reduce((a, b) => a + b, 0);
  const wsum = deal.splits.reduce((a, s) => a + s.weight, 0);
  const splitTarget = deal.splits.map((s) => (wsum > 0 ? (records * s.weight) / wsum : 0));
  const parts: UnitSize[] = partPaths.map((label, p) => {
    let n = 0;
    for (let f = 0; f < K; f++) n += cells[p * K + f]!;
    return { label, records: n, target: splitTarget[Math.floor(p / P)]! / P };
  });
  const folds: UnitSize[] = [];
  if (K > 1) {
    deal.splits.forEach((s, split) => {
      for (let f = 0; f < K; f++) {
        let n = 0;
        for (let p = 0; p < P; p++) n += cells[(split * P + p) * K + f]!;
        folds.push({ label: `fold ${f}${deal.splits.length > 1 ? ` of split ${s.name}` : ''}`, records: n, target: splitTarget[split]! / K });
      }
    });
  }
  return { parts, folds };
}

/** The largest relative distance of a size from its target (0 where the target is 0). */
export function worstSizeDeviation(units: readonly UnitSize[]): number {
  return units.reduce((m, u) => (u.target > 0 ? Math.max(m, Math.abs(u.records - u.target) / u.target) : m), 0);
}

function count(n: number): string {
  return Math.round(n).toLocaleString('en-US');
}

/**
 * The warnings of a group run: one line for parts and one for folds whose sizes stray from their
 * targets by more than `tolerance`, or that get no records. `group` is the option as the caller
 * spells it with its value (`--group sensor`, `group "sensor"`).
 */
export function groupSizeWarnings(sizes: { parts: UnitSize[]; folds: UnitSize[] }, groups: number, tolerance: number, group: string): string[] {
  const out: string[] = [];
  for (const [units, what] of [
    [sizes.parts, 'part'],
    [sizes.folds, 'fold'],
  ] as const) {
    if (units.length === 0) continue;
    const dev = worstSizeDeviation(units);
    const empty = units.filter((u) => u.records === 0 && u.target > 0);
    if (dev <= tolerance && empty.length === 0) continue;
    const low = Math.min(...units.map((u) => u.records));
    const high = Math.max(...units.map((u) => u.records));
    const targets = [...new Set(units.map((u) => Math.round(u.target)))];
    const target = targets.length === 1 ? `a target of ${count(targets[0]!)} each` : `targets of ${count(Math.min(...targets))} to ${count(Math.max(...targets))}`;
    const none = empty.length > 0 ? `${empty.length} ${what}${empty.length === 1 ? ' gets' : 's get'} no records (${empty.slice(0, 3).map((u) => u.label).join(', ')}${empty.length > 3 ? ', …' : ''}); ` : '';
    out.push(
      `warning: ${group}: ${count(groups)} group${groups === 1 ? '' : 's'} for ${units.length} ${what}s: ${none}${what} sizes run from ${count(low)} to ${count(high)} records against ${target} ` +
        `(off by up to ${(dev * 100).toFixed(0)}%${dev > tolerance ? `, more than the tolerance ${tolerance}` : ''}). Whole groups are dealt, so sizes follow them: use fewer ${what === 'part' ? 'partitions' : 'folds'}, or group by a column with more, smaller groups.`,
    );
  }
  return out;
}
