/**
 * A verify report's checks grouped for people: one entry per check and outcome, with the files it
 * ran on, in the order the checks were made. Used by `rowdeck verify` on the terminal and by the
 * HTML report.
 */
import type { VerifyCheck, VerifyReport, VerifyStatus } from '../engine/verify.js';

export interface CheckGroup {
  check: string;
  status: VerifyStatus;
  files: string[];
  /** The notes given (why skipped, what it was computed from), each once. */
  notes: string[];
}

export function groupChecks(checks: VerifyCheck[]): CheckGroup[] {
  const groups = new Map<string, CheckGroup>();
  for (const c of checks) {
    const id = `${c.check}\u0000${c.status}`;
    let g = groups.get(id);
    if (!g) {
      g = { check: c.check, status: c.status, files: [], notes: [] };
      groups.set(id, g);
    }
    if (!g.files.includes(c.file)) g.files.push(c.file);
    if (c.note !== undefined && !g.notes.includes(c.note)) g.notes.push(c.note);
  }
  return [...groups.values()];
}

/** Counts of checks by outcome. */
export function countChecks(r: VerifyReport): Record<VerifyStatus, number> {
  const n: Record<VerifyStatus, number> = { passed: 0, failed: 0, skipped: 0 };
  for (const c of r.checks) n[c.status]++;
  return n;
}

/**
 * Files named for a line of text: all of them when few, else the first and last with how many
 * in all ("part-00000.csv … part-00063.csv, 64 files").
 */
export function describeFiles(files: string[], max = 4): string {
  if (files.length <= max) return files.join(', ');
  return `${files.slice(0, max - 1).join(', ')} … ${files[files.length - 1]} (${files.length.toLocaleString('en-US')} files)`;
}
