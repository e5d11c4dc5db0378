/**
 * `--split` (`split`): the rule for named splits and their weights, and the names a split may not
 * take (those of rowdeck's own files in an output folder).
 */
import type { SplitSpec } from '../core/deal.js';
import { RESERVED_OUTPUT_NAMES } from '../io/output-folder.js';
import { showGot, type Checker } from './spec.js';

export interface ParsedSplits {
  splits: SplitSpec[];
  /** Whether the weights are record counts (else fractions of 1). */
  counts: boolean;
  /** Among counts, the split given as '*' (the rest, known once the records are counted), or -1. */
  rest: number;
}

/** Stems of the files rowdeck writes into an output folder: a split named so (or so followed by ".") could take their place. */
const RESERVED_STEMS = RESERVED_OUTPUT_NAMES.map((n) => n.slice(0, n.indexOf('.')));

export function isReservedSplitName(name: string): boolean {
  const lower = name.toLowerCase();
  return RESERVED_STEMS.some((stem) => lower === stem || lower.startsWith(`${stem}.`));
}

/** How far fractions may be from adding up to 1 (floating point: 0.7 + 0.2 + 0.1 is 0.9999999999999999). */
export const SPLIT_SUM_SLACK = 1e-9;

/** A sum as people write it (no floating-point tail). */
function showSum(x: number): string {
  return String(Number(x.toPrecision(12)));
}

const SPLIT_EXPECTED = 'NAME=WEIGHT pairs such as train=0.8,valid=0.1,test=0.1 (fractions adding up to 1), train=8000,test=2000 (record counts), or train=0.8,test=* (* takes the rest)';
const SPLIT_RULE = 'Weights are fractions (with a decimal point) adding up to 1, or record counts (whole numbers), and one split may be * to take the rest.';

/**
 * The one rule for splits: a weight is a fraction (written with a decimal point; in an object, a
 * number that is not whole) from 0 to 1, a record count (a whole number), or '*' (the rest, at most
 * one). Fractions must add up to 1 within 1e-9, or to less with a '*' taking the rest; counts and
 * fractions do not mix. Counts must add up to the records (or stay within them with a '*'): that is
 * checked once they are known (RDK_SPLIT_SIZES).
 */
export function parseSplits(v: string | Record<string, number | '*'> | undefined, c: Checker): ParsedSplits {
  if (v === undefined) return { splits: [{ name: '', weight: 1 }], counts: false, rest: -1 };
  let entries: [string, { kind: 'rest' } | { kind: 'count' | 'fraction'; n: number; text: string }][];
  const shown = typeof v === 'string' ? JSON.stringify(v) : showGot(v, c.surface);
  const bad = (why: string): never => c.reject(`${why}, in ${shown}. ${SPLIT_RULE}`);
  if (typeof v === 'string') {
    entries = v.split(',').map((p) => {
      const i = p.indexOf('=');
      if (i <= 0) return c.fail(SPLIT_EXPECTED, v);
      const name = p.slice(0, i).trim();
      const w = p.slice(i + 1).trim();
      if (w === '*') return [name, { kind: 'rest' }];
      if (/^\d+$/.test(w)) return [name, { kind: 'count', n: Number(w), text: w }];
      if (/^(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$/.test(w)) return [name, { kind: 'fraction', n: Number(w), text: w }];
      return bad(`the weight of "${name}" is ${JSON.stringify(w)}, not a fraction, a count or *`);
    });
  } else if (typeof v === 'object' && v !== null && !Array.isArray(v)) {
    entries = Object.entries(v).map(([name, w]) => {
      if (w === '*') return [name, { kind: 'rest' }];
      if (typeof w !== 'number' || !Number.isFinite(w) || w < 0) return bad(`the weight of "${name}" is ${showGot(w, c.surface)}, not a fraction, a count or "*"`);
      return [name, { kind: Number.isInteger(w) ? 'count' : 'fraction', n: w, text: String(w) }];
    });
  } else return c.fail(SPLIT_EXPECTED, v);
  if (entries.length < 2) bad('one split only: give at least two');
  const names = new Set<string>();
  for (const [name] of entries) {
    if (!/^[A-Za-z0-9][A-Za-z0-9_.-]*$/.test(name)) {
      c.fail('split names of letters, digits, "_", "-" or "." (a name, not a path), starting with a letter or digit', name);
    }
    if (isReservedSplitName(name)) c.fail(`split names other than those of the files rowdeck writes itself (${RESERVED_STEMS.join(', ')}, in any case)`, name);
    if (names.has(name)) c.fail('distinct split names', name);
    names.add(name);
  }
  const rests = entries.filter(([, w]) => w.kind === 'rest').map(([name]) => name);
  if (rests.length > 1) bad(`${rests.join(' and ')} are both *, and only one split may take the rest`);
  const counts = entries.filter(([, w]) => w.kind === 'count');
  const fractions = entries.filter(([, w]) => w.kind === 'fraction');
  if (counts.length > 0 && fractions.length > 0) {
    const [cn, cw] = counts[0]!;
    const [fn, fw] = fractions[0]!;
    bad(`${cn}=${(cw as { text: string }).text} is a record count and ${fn}=${(fw as { text: string }).text} a fraction, and the two do not mix (give the other as * to take the rest)`);
  }
  const restAt = entries.findIndex(([, w]) => w.kind === 'rest');
  if (fractions.length > 0 || (counts.length === 0 && restAt >= 0)) {
    // Fractions (or only '*', which is everything).
    const over = fractions.find(([, w]) => (w as { n: number }).n > 1);
    if (over) bad(`${over[0]}=${(over[1] as { text: string }).text} is a fraction above 1 (a record count is a whole number)`);
    const sum = fractions.reduce((a, [, w]) => a + (w as { n: number }).n, 0);
    const terms = fractions.map(([, w]) => (w as { text: string }).text).join(' + ');
    if (restAt < 0) {
      if (Math.abs(sum - 1) > SPLIT_SUM_SLACK) bad(`the fractions add up to ${showSum(sum)} (${terms}), not 1`);
      return { splits: entries.map(([name, w]) => ({ name, weight: (w as { n: number }).n })), counts: false, rest: -1 };
    }
    const left = 1 - sum;
    if (left <= SPLIT_SUM_SLACK) bad(`the fractions add up to ${showSum(sum)} (${terms}), which leaves nothing for ${entries[restAt]![0]}=*`);
    return { splits: entries.map(([name, w]) => ({ name, weight: w.kind === 'rest' ? left : w.n })), counts: false, rest: -1 };
  }
  return { splits: entries.map(([name, w]) => ({ name, weight: w.kind === 'rest' ? 0 : w.n })), counts: true, rest: restAt };
}
