/**
 * Writing reports: `writeReport(dir)` turns an output folder's manifest (and, when asked, a fresh
 * verify of the folder) into `dir/report.html`; `writeProfileReport` writes a profile's page.
 * Files are written whole or not at all: into a temporary file beside the target, then renamed
 * over it, so a reader never sees half a page and a failure leaves the old file as it was.
 */
import { basename, resolve } from 'node:path';
import type { Manifest } from '../engine/manifest.js';
import type { Profile } from '../engine/profile.js';
import { loadManifest, verify, type VerifyReport } from '../engine/verify.js';
import { fromCommandLine, resolveReportOptions, type ReportOptions, type VerifyOptions } from '../options.js';
import { writeFileAtomic, writeManifestReport } from './file.js';
import { renderProfileReport } from './profile-html.js';

export { REPORT_FILE, writeFileAtomic } from './file.js';

export type { ReportOptions } from '../options.js';

export interface ReportResult {
  /** The report file written. */
  path: string;
  manifest: Manifest;
  /** The verify report shown on the page, when `verify` was asked. */
  verify: VerifyReport | null;
}

/**
 * Writes `dir/report.html` from `dir/manifest.json`: the class mix of every part and fold,
 * deviations, sizes, splits, bins, statistics, the run's seed, options, inputs and checksums, and
 * with `verify` the outcome of re-reading every part. The verify result is returned whether it
 * passed or not (the page shows it either way).
 */
export async function writeReport(dir: string, given: ReportOptions = {}): Promise<ReportResult> {
  const options = resolveReportOptions(dir, given);
  const manifest = loadManifest(dir);
  let report: VerifyReport | null = null;
  if (options.verify) {
    const v: VerifyOptions = { dir, ...(options.threads !== undefined ? { threads: options.threads } : {}), ...(options.onProgress ? { onProgress: options.onProgress } : {}) };
    report = await verify(options.surface === 'cli' ? fromCommandLine(v) : v);
  }
  const path = writeManifestReport(dir, manifest, basename(resolve(dir)), report);
  return { path, manifest, verify: report };
}

/** Writes a profile's page to `file` (atomically); returns the path. */
export function writeProfileReport(profile: Profile, file: string): string {
  writeFileAtomic(file, renderProfileReport(profile));
  return file;
}
