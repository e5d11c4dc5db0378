/**
 * How numbers are written in the report and the terminal summary. One set of rules, so the page,
 * the terminal and the tests that read them back agree: counts with thousands separators, shares
 * and deviations as percentages with a fixed number of decimals, other figures with six
 * significant digits.
 */

/** 1,305 */
export function formatCount(n: number): string {
  return n.toLocaleString('en-US', { maximumFractionDigits: 0 });
}

/** 20.0% (a share; `digits` decimals). */
export function formatPercent(x: number, digits = 1): string {
  return `${(x * 100).toFixed(digits)}%`;
}

/** The minus sign used in signed figures (U+2212, as wide as the plus sign). */
export const MINUS = '\u2212';

/**
 * +1.67% / −0.42% / 0.00%: a signed relative deviation. A value that rounds to zero is written
 * without a sign, so the page never shows "−0.00%".
 */
export function formatSignedPercent(x: number, digits = 2): string {
  const text = Math.abs(x * 100).toFixed(digits);
  if (Number(text) === 0) return `${text}%`;
  return `${x < 0 ? MINUS : '+'}${text}%`;
}

/** Six significant digits, no trailing zeros, plain notation where it stays short. */
export function formatNumber(x: number): string {
  if (Number.isInteger(x) && Math.abs(x) < 1e15) return x < 0 ? MINUS + String(-x) : String(x);
  const a = Math.abs(x);
  const text = a !== 0 && (a < 1e-4 || a >= 1e15) ? a.toExponential(5).replace(/\.?0+e/, 'e') : String(Number(a.toPrecision(6)));
  return x < 0 ? MINUS + text : text;
}

/** 12.3 MB, 850 kB, 1.2 GB: for the terminal, where exact byte counts are noise. */
export function formatBytesShort(n: number): string {
  if (n >= 1e9) return `${(n / 1e9).toFixed(n >= 1e10 ? 0 : 1)} GB`;
  if (n >= 1e6) return `${(n / 1e6).toFixed(n >= 1e7 ? 0 : 1)} MB`;
  if (n >= 1e3) return `${(n / 1e3).toFixed(0)} kB`;
  return `${n} B`;
}

/** "1 part", "4 parts". */
export function plural(n: number, one: string, many = `${one}s`): string {
  return `${formatCount(n)} ${n === 1 ? one : many}`;
}
