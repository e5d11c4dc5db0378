/**
 * Writing a report file whole or not at all: into a temporary file beside the target, then
 * renamed over it, so a reader never sees half a page and a failure leaves the old file as it
 * was. Kept apart from write.ts (which runs verify) so shuffle can use it without a cycle.
 */
import { renameSync, rmSync, writeFileSync } from 'node:fs';
import { basename, dirname, join } from 'node:path';
import { RowdeckError } from '../errors.js';
import type { Manifest } from '../engine/manifest.js';
import type { VerifyReport } from '../engine/verify.js';
import { renderManifestReport } from './html.js';

/** The report's name inside an output folder. */
export const REPORT_FILE = 'report.html';

/** Writes `text` to `path` through a temporary file in the same folder and a rename. */
export function writeFileAtomic(path: string, text: string): void {
  const temp = join(dirname(path), `.${basename(path)}.${process.pid}.tmp`);
  try {
    writeFileSync(temp, text, 'utf8');
    renameSync(temp, path);
  } catch (err) {
    rmSync(temp, { force: true });
    const e = err as NodeJS.ErrnoException;
    if (e.code === 'ENOENT') {
      throw new RowdeckError('RDK_IO', `${path}: cannot write the report: the folder ${dirname(path)} does not exist. Create it, or give a path in an existing folder.`, { file: path, errno: e.code });
    }
    throw new RowdeckError('RDK_IO', `${path}: writing the report failed: ${e.message}. Check that the folder is writable and has space.`, { file: path, errno: e.code });
  }
}

/** Writes the report of a manifest into `dir` (used by shuffle inside its staging folder, with the final folder's name). */
export function writeManifestReport(dir: string, manifest: Manifest, folder: string, verifyReport: VerifyReport | null = null): string {
  const path = join(dir, REPORT_FILE);
  writeFileAtomic(path, renderManifestReport(manifest, { folder, verify: verifyReport }));
  return path;
}

