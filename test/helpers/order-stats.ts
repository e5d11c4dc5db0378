/**
 * Tests of the order of a sequence, not only of each record's place: the runs test and the
 * serial test on adjacent pairs, with the critical values they are compared against.
 */

/**
 * Two-sided critical value of the standard normal distribution at alpha = 0.001: z(0.0005) =
 * 3.291 (NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.1, table of upper critical
 * values of the normal distribution; from memory, and the common-practice value).
 */
export const Z_001 = 3.291;

/**
 * Upper 0.1 % points of the chi-square distribution (P(X > c) = 0.001), NIST/SEMATECH
 * e-Handbook §1.3.6.7.4, as recomputed with SciPy's chi2.isf (../shared REFERENCES B5).
 */
export const CHI2_001: Record<number, number> = { 3: 16.266, 8: 26.124, 15: 37.697 };

export interface RunsResult {
  n1: number;
  n2: number;
  runs: number;
  z: number;
}

/**
 * Wald–Wolfowitz runs test (Wald & Wolfowitz 1940; NIST/SEMATECH e-Handbook §1.3.5.13) on a
 * two-valued sequence: with n1 and n2 items and R runs, E[R] = 2·n1·n2/n + 1 and
 * Var[R] = 2·n1·n2·(2·n1·n2 − n) / (n²·(n − 1)); z = (R − E[R]) / sd is close to standard normal
 * for n1, n2 above ~20. z ≫ 0: too regular an alternation; z ≪ 0: clumps.
 */
export function runsTest(seq: ArrayLike<boolean>): RunsResult {
  let n1 = 0;
  let runs = 0;
  for (let i = 0; i < seq.length; i++) {
    if (seq[i]) n1++;
    if (i === 0 || seq[i] !== seq[i - 1]) runs++;
  }
  const n = seq.length;
  const n2 = n - n1;
  const mean = (2 * n1 * n2) / n + 1;
  const variance = (2 * n1 * n2 * (2 * n1 * n2 - n)) / (n * n * (n - 1));
  return { n1, n2, runs, z: (runs - mean) / Math.sqrt(variance) };
}

/**
 * Serial test on pairs (Knuth, TAOCP vol. 2, §3.3.2 B): the sequence cut into non-overlapping
 * pairs (x0, x1), (x2, x3), …, and the count of each pair (a, b) of k categories compared with
 * its expectation, chi-square. The expectation is exact for a uniformly random order of the
 * sequence's own multiset: P(a, b) = n_a·n_b / (n(n−1)) for a ≠ b, n_a(n_a − 1) / (n(n−1)) for
 * a = b. Degrees of freedom: k² − 1 (the larger of the choices for known and estimated shares,
 * so the test errs towards passing a good order; see REFERENCES B9).
 */
export function serialTest(seq: ArrayLike<number>, k: number): { chi2: number; df: number; pairs: number } {
  const n = seq.length;
  const count = new Array<number>(k).fill(0);
  for (let i = 0; i < n; i++) count[seq[i]!]!++;
  const pairs = Math.floor(n / 2);
  const observed = new Array<number>(k * k).fill(0);
  for (let i = 0; i + 1 < n; i += 2) observed[seq[i]! * k + seq[i + 1]!]!++;
  let chi2 = 0;
  for (let a = 0; a < k; a++) {
    for (let b = 0; b < k; b++) {
      const p = a === b ? (count[a]! * (count[a]! - 1)) / (n * (n - 1)) : (count[a]! * count[b]!) / (n * (n - 1));
      const e = pairs * p;
      if (e > 0) chi2 += (observed[a * k + b]! - e) ** 2 / e;
    }
  }
  return { chi2, df: k * k - 1, pairs };
}
