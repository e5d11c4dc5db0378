/**
 * What `verify()` returns, and Findings, the list of checks and mismatches each step of it
 * fills. A failed check is a result, not an error: it is listed here and `ok` is false.
 */
import type { PartOrder } from '../../options.js';

export type VerifyStatus = 'passed' | 'failed' | 'skipped';

export interface VerifyCheck {
  /** Output file (relative to the folder), `manifest.json`, or an input path. */
  file: string;
  /** What was checked: `present`, `bytes`, `sha256`, `readable`, `header`, `records`, `strata`, `folds`, `fold values`, `fold strata`, `fingerprint`, `balance`, … */
  check: string;
  status: VerifyStatus;
  /** Why a check was skipped, or what it was computed from. */
  note?: string;
}

export interface VerifyMismatch {
  file: string;
  check: string;
  /** Which entry of a per-class or per-fold check, e.g. `fault="drift"` or `fold 3`. */
  item?: string;
  /** Physical line (1-based) of the first record concerned, where there is one. */
  line?: number;
  expected: string | number;
  found: string | number;
}

/** One record that is in the inputs but not in the output, or the other way round. */
export interface RecordDifference {
  kind: 'missing' | 'extra';
  /** Input path (missing) or output part (extra). */
  file: string;
  line: number;
  /** The record's text without its line end and without the fold column (cut to 200 characters). */
  record: string;
  /** Copies of this exact record in the inputs and in the output. */
  copies: { input: number; output: number };
}

export interface VerifyAgainst {
  inputs: string[];
  records: number;
  rejected: number;
  fingerprint: string;
  /** null when the inputs and the output hold the same records. */
  differences: {
    /** Records in the inputs but not in the output, counting copies. */
    missing: number;
    extra: number;
    listed: RecordDifference[];
    /** `listed`: every difference or the first 20 of each kind are listed; `counts only`: too many records to list them. */
    listing: 'listed' | 'counts only';
  } | null;
}

export interface VerifyReport {
  ok: boolean;
  /** The folder checked, as given. */
  dir: string;
  manifestVersion: number;
  /** Which dealing scheme wrote the output (1 for manifests of version 1: see Manifest.dealingScheme). */
  dealingScheme: number;
  /** The order inside the parts the manifest promises (manifests of version 1: "interleaved", scheme 1's). */
  order: PartOrder | 'interleaved';
  records: number;
  parts: number;
  checks: VerifyCheck[];
  mismatches: VerifyMismatch[];
  against: VerifyAgainst | null;
  /**
   * With `against`: the shuffle run again from the manifest's seed and options. `passed`: the
   * parts are exactly what that seed gives; `failed`: they (or the manifest) are not, mismatches
   * under the check `replay`; `skipped`: see `note`. null without `against`.
   */
  replay: { status: VerifyStatus; seed: string | null; note: string } | null;
}

/** A mismatch before it is filed under a file and a check. */
export type Mismatch = Omit<VerifyMismatch, 'file' | 'check'>;

/** No mismatch when the two are equal, else one. */
export function same(expected: string | number, found: string | number): Mismatch[] {
  return expected === found ? [] : [{ expected, found }];
}

/** Checks in the order they were made, and the mismatches of the failed ones. */
export class Findings {
  readonly checks: VerifyCheck[] = [];
  readonly mismatches: VerifyMismatch[] = [];

  pass(file: string, check: string, note?: string): void {
    this.checks.push(note === undefined ? { file, check, status: 'passed' } : { file, check, status: 'passed', note });
  }

  skip(file: string, check: string, note: string): void {
    this.checks.push({ file, check, status: 'skipped', note });
  }

  /** Records one check: passed when `bad` is empty, else failed with every mismatch listed. */
  judge(file: string, check: string, bad: Mismatch[], note?: string): boolean {
    if (bad.length === 0) {
      this.pass(file, check, note);
      return true;
    }
    this.checks.push(note === undefined ? { file, check, status: 'failed' } : { file, check, status: 'failed', note });
    for (const b of bad) this.mismatches.push({ file, check, ...b });
    return false;
  }

  /** Appends another step's findings after these. */
  add(other: Findings): void {
    // One at a time: a folder of many parts has more checks than a call takes arguments.
    for (const c of other.checks) this.checks.push(c);
    for (const x of other.mismatches) this.mismatches.push(x);
  }
}
