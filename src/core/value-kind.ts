/**
 * Value classification for the column statistics: what kind a value is, read from its bytes in
 * one pass without building a string, and for a number its value (as a double, and as a decimal
 * m / 10^k where it has at most 15 significant digits).
 *
 * Type inference, per column, over its non-missing values:
 * - integer: every value is a decimal integer of at most 2^53 in magnitude (larger integers are
 *   counted as `number`, since a double cannot hold them exactly);
 * - number: every value is a decimal number (integers included); `NaN`, `Infinity` and numbers
 *   that overflow a double are text;
 * - boolean: every value is `true` or `false` (any letter case);
 * - datetime: every value is an ISO 8601 calendar date `YYYY-MM-DD`, optionally followed by
 *   `T` or a space, `HH:MM`, optional `:SS` and fraction, and an optional `Z` or `±HH:MM` offset;
 * - text: anything else, including a mix of the kinds above (other than integer with number);
 * - empty: no values at all.
 * A JSON string is read by its content, like a CSV field: `"12"` counts as a number.
 */

export const K_INT = 0;
export const K_NUM = 1;
export const K_BOOL = 2;
export const K_DATE = 3;
export const K_TEXT = 4;

/** Exact squares stop being safe past this magnitude (x² must fit, with n·Σx², in a double). */
export const HUGE = 2 ** 450;
const MAX_SAFE = Number.MAX_SAFE_INTEGER;
const POW10 = [1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22];
/** Significant digits a decimal may have to be summed as one (its mantissa stays below 2^50). */
const DECIMAL_DIGITS = 15;

/**
 * Set by classifyValue() when it returns K_INT or K_NUM (avoids returning a tuple): [0] the value
 * as a double, [1] its decimal mantissa m (value = m / 10^scale) when `parsedScale[0]` >= 0. Typed
 * arrays, not `let`s: a double stored in a module variable is boxed on every write, a slot is not.
 */
export const parsed = new Float64Array(2);
/** Decimal scale k of the last number read, or -1 when it is summed as a double instead. */
export const parsedScale = new Int32Array(1);

/**
 * Reads a decimal number: [+-] digits [. digits] [e [+-] digits], or [+-] . digits [e ...], in
 * one pass over its bytes, without allocating.
 * - Up to 15 significant digits at a scale k (digits after the point, less the exponent) of 0..22:
 *   a decimal m / 10^k, summed exactly as such (see DecimalSums); its double is m / 10^k or
 *   m · 10^-k, both operands exact, so the one operation is correctly rounded and equals
 *   Number(text) (Clinger's fast path).
 * - Anything longer: Number(text), summed as that double (see ExactMoments).
 * Returns K_INT, K_NUM, or K_TEXT when the bytes are not such a number or overflow.
 */
function classifyNumber(b: Buffer, s: number, e: number): number {
  let i = s;
  let neg = false;
  let c = b[i]!;
  if (c === 0x2d || c === 0x2b) {
    neg = c === 0x2d;
    i++;
  }
  let mant = 0;
  let sig = 0; // significant digits (leading zeros not counted)
  let digits = 0;
  let frac = 0;
  while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
    mant = mant * 10 + (c - 0x30);
    if (mant !== 0) sig++;
    digits++;
    i++;
  }
  let dot = false;
  if (i < e && b[i] === 0x2e) {
    dot = true;
    i++;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
      mant = mant * 10 + (c - 0x30);
      if (mant !== 0) sig++;
      frac++;
      i++;
    }
    digits += frac;
  }
  if (digits === 0) return K_TEXT;
  let exp = false;
  let ev = 0;
  if (i < e && (b[i] === 0x65 || b[i] === 0x45)) {
    exp = true;
    i++;
    let eneg = false;
    if (i < e && (b[i] === 0x2b || b[i] === 0x2d)) eneg = b[i++] === 0x2d;
    const es = i;
    while (i < e && (c = b[i]!) >= 0x30 && c <= 0x39) {
      if (ev < 100000) ev = ev * 10 + (c - 0x30);
      i++;
    }
    if (i === es) return K_TEXT;
    if (eneg) ev = -ev;
  }
  if (i !== e) return K_TEXT;
  const k = frac - ev;
  let v: number;
  if (sig <= DECIMAL_DIGITS && k >= 0 && k <= 22) {
    v = k === 0 ? mant : mant / POW10[k]!;
    parsed[1] = neg ? -mant : mant;
    parsedScale[0] = k;
  } else if (sig + (-k) <= DECIMAL_DIGITS && k < 0) {
    // A whole number below 10^15 written with an exponent: m · 10^-k exactly.
    mant *= POW10[-k]!;
    v = mant;
    parsed[1] = neg ? -mant : mant;
    parsedScale[0] = 0;
  } else {
    v = Number(b.toString('latin1', s, e));
    if (!Number.isFinite(v)) return K_TEXT;
    parsedScale[0] = -1;
    neg = false;
  }
  parsed[0] = neg ? -v : v;
  return !dot && !exp && (v <= MAX_SAFE && v >= -MAX_SAFE) ? K_INT : K_NUM;
}

/** Value of the two ASCII digits b[i], b[i + 1] (both within the value), or -1 when not digits. */
function readTwoDigits(b: Uint8Array, i: number): number {
  const x = b[i]! - 0x30;
  const y = b[i + 1]! - 0x30;
  return x >= 0 && x <= 9 && y >= 0 && y <= 9 ? x * 10 + y : -1;
}

const DAYS_IN_MONTH = [0, 31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31];

/**
 * ISO 8601 calendar date `YYYY-MM-DD`, optionally followed by `T`/`t`/space, `HH:MM`, optional
 * `:SS` (up to 60, a leap second) with an optional `.` or `,` fraction, and an optional `Z` or
 * `±HH[:]MM` / `±HH` offset. Lengths are checked before each read, so no read leaves the value.
 */
function isIsoDatetime(b: Uint8Array, s: number, e: number): boolean {
  const n = e - s;
  if (n < 10 || b[s + 4] !== 0x2d || b[s + 7] !== 0x2d) return false;
  const century = readTwoDigits(b, s);
  const yy = readTwoDigits(b, s + 2);
  const month = readTwoDigits(b, s + 5);
  const day = readTwoDigits(b, s + 8);
  if (century < 0 || yy < 0 || month < 1 || month > 12 || day < 1 || day > DAYS_IN_MONTH[month]!) return false;
  if (month === 2 && day === 29) {
    const year = century * 100 + yy;
    if (!(year % 4 === 0 && (year % 100 !== 0 || year % 400 === 0))) return false;
  }
  if (n === 10) return true;
  const sep = b[s + 10];
  if ((sep !== 0x54 && sep !== 0x74 && sep !== 0x20) || n < 16 || b[s + 13] !== 0x3a) return false;
  const hh = readTwoDigits(b, s + 11);
  const mm = readTwoDigits(b, s + 14);
  if (hh < 0 || hh > 23 || mm < 0 || mm > 59) return false;
  let i = s + 16;
  if (i < e && b[i] === 0x3a) {
    if (i + 3 > e) return false;
    const ss = readTwoDigits(b, i + 1);
    if (ss < 0 || ss > 60) return false;
    i += 3;
    if (i < e && (b[i] === 0x2e || b[i] === 0x2c)) {
      const fs = ++i;
      while (i < e && b[i]! >= 0x30 && b[i]! <= 0x39) i++;
      if (i === fs) return false;
    }
  }
  if (i === e) return true;
  const z = b[i];
  if ((z === 0x5a || z === 0x7a) && i + 1 === e) return true;
  if (z !== 0x2b && z !== 0x2d) return false;
  i++;
  if (i + 2 > e) return false;
  const oh = readTwoDigits(b, i);
  if (oh < 0 || oh > 23) return false;
  i += 2;
  if (i === e) return true;
  if (b[i] === 0x3a) i++;
  if (i + 2 !== e) return false;
  const om = readTwoDigits(b, i);
  return om >= 0 && om <= 59;
}

function isBoolean(b: Uint8Array, s: number, e: number): boolean {
  const n = e - s;
  if (n === 4) {
    return (b[s]! | 0x20) === 0x74 && (b[s + 1]! | 0x20) === 0x72 && (b[s + 2]! | 0x20) === 0x75 && (b[s + 3]! | 0x20) === 0x65;
  }
  if (n === 5) {
    return (
      (b[s]! | 0x20) === 0x66 && (b[s + 1]! | 0x20) === 0x61 && (b[s + 2]! | 0x20) === 0x6c &&
      (b[s + 3]! | 0x20) === 0x73 && (b[s + 4]! | 0x20) === 0x65
    );
  }
  return false;
}

/** Kind of one non-empty value; sets parsed/parsedScale for numbers. */
export function classifyValue(b: Buffer, s: number, e: number): number {
  const c = b[s]!;
  if ((c >= 0x30 && c <= 0x39) || c === 0x2d || c === 0x2b || c === 0x2e) {
    if (e - s >= 10 && b[s + 4] === 0x2d && isIsoDatetime(b, s, e)) return K_DATE;
    return classifyNumber(b, s, e);
  }
  if ((c | 0x20) === 0x74 || (c | 0x20) === 0x66) return isBoolean(b, s, e) ? K_BOOL : K_TEXT;
  return K_TEXT;
}

/**
 * Bit of a kind in a column's set of kinds seen: integers and numbers share one (they widen to
 * number), so the type is decided as text as soon as the set has the text bit or two bits.
 */
export const KIND_BIT = [1, 1, 2, 4, 8];

export function isTextFor(kindBits: number): boolean {
  return (kindBits & 8) !== 0 || (kindBits & (kindBits - 1)) !== 0;
}
