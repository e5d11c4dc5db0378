/**
 * Work folders (staging and spill) and whether their owner still runs.
 *
 * A run's hidden folders carry its process id in their names (`.rowdeck-spill-<pid>-…`,
 * `.rowdeck-partial-<pid>-…`). A run killed outright (SIGKILL, power loss) cannot remove them, so
 * every run removes those of dead processes: by name, in the places it works in (beside the
 * output, inside an existing output folder, the spill folder), and, wherever they are, through a
 * small per-user record of live runs (`<tmp>/rowdeck-runs-<uid>/<host>-<pid>.json`, or
 * `ROWDECK_RUNS_DIR`) that lists each run's folders while it works. Only paths whose names carry
 * the dead run's own process id are ever removed through that record.
 */
import { closeSync, lstatSync, mkdirSync, openSync, readdirSync, readFileSync, rmSync, unlinkSync, writeSync } from 'node:fs';
import { hostname, tmpdir } from 'node:os';
import { basename, join } from 'node:path';
import { flags } from '../flags.js';

const WORK_NAME = /^\.rowdeck-(?:spill|partial)-(\d+)-/;

/** The kernel's start time of a process (clock ticks since boot), to tell a reused process id; null where unknown. */
export function readProcessStart(pid: number): string | null {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    // Fields after the command name (which may hold spaces and parentheses): state is field 3, starttime field 22.
    return stat.slice(stat.lastIndexOf(')') + 2).split(' ')[19] ?? null;
  } catch {
    return null;
  }
}

/** Whether process `pid` on this host is alive (and, where `start` is known, is the same process). */
export function isProcessAlive(pid: number, start?: string | null): boolean {
  if (!Number.isInteger(pid) || pid <= 0) return false;
  try {
    process.kill(pid, 0);
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code !== 'EPERM') return false;
  }
  if (start) {
    const now = readProcessStart(pid);
    if (now !== null && now !== start) return false;
  }
  return true;
}

/**
 * Removes the work folders of dead runs directly in `dir` (by name); returns the paths removed.
 * A folder that cannot be removed is left (and not listed).
 */
export function removeStaleWorkFolders(dir: string): string[] {
  const removed: string[] = [];
  for (const name of listQuietly(dir)) {
    const m = WORK_NAME.exec(name);
    if (!m) continue;
    const pid = Number(m[1]);
    if (pid === process.pid || isProcessAlive(pid)) continue;
    try {
      rmSync(join(dir, name), { recursive: true, force: true });
      removed.push(join(dir, name));
    } catch {
      // Someone else's, or not ours to remove: leave it.
    }
  }
  return removed;
}

interface RunEntry {
  pid: number;
  host: string;
  start: string | null;
  paths: string[];
}

/** The per-user folder of run records, or null where it cannot be used safely. */
function runsFolder(): string | null {
  const dir = flags.runsDir ?? join(tmpdir(), `rowdeck-runs-${typeof process.getuid === 'function' ? process.getuid() : 'user'}`);
  try {
    mkdirSync(dir, { recursive: true, mode: 0o700 });
    const st = lstatSync(dir);
    // Only a real folder of our own (the temporary folder is shared with other users).
    if (!st.isDirectory() || (typeof process.getuid === 'function' && st.uid !== process.getuid())) return null;
    return dir;
  } catch {
    return null;
  }
}

/**
 * This run's entry in the record of live runs: the work folders it has made, so that a later run
 * can remove them if this one is killed. Best effort: where the record cannot be written, the
 * by-name removal still applies.
 */
export class RunRecord {
  readonly #file: string | null;
  readonly #entry: RunEntry;

  constructor() {
    const dir = runsFolder();
    this.#file = dir === null ? null : join(dir, `${hostname()}-${process.pid}.json`);
    this.#entry = { pid: process.pid, host: hostname(), start: readProcessStart(process.pid), paths: [] };
  }

  add(...paths: string[]): void {
    if (paths.length === 0) return;
    this.#entry.paths.push(...paths);
    this.#save();
  }

  remove(path: string): void {
    const i = this.#entry.paths.indexOf(path);
    if (i >= 0) this.#entry.paths.splice(i, 1);
    this.#save();
  }

  /** Removes the entry (the run is over and has cleaned up). */
  close(): void {
    this.#entry.paths.length = 0;
    if (this.#file === null) return;
    try {
      unlinkSync(this.#file);
    } catch {
      // Never written, or already gone.
    }
  }

  #save(): void {
    if (this.#file === null) return;
    try {
      if (this.#entry.paths.length === 0) {
        unlinkSync(this.#file);
        return;
      }
      const fd = openSync(this.#file, 'w', 0o600);
      try {
        writeSync(fd, JSON.stringify(this.#entry));
      } finally {
        closeSync(fd);
      }
    } catch {
      // Best effort (see the class comment).
    }
  }
}

/**
 * Removes what the records of dead runs on this host list (only names carrying the dead run's
 * process id), then the records; returns the paths removed.
 */
export function sweepRunRecords(): string[] {
  const dir = runsFolder();
  const removed: string[] = [];
  if (dir === null) return removed;
  const host = hostname();
  for (const name of listQuietly(dir)) {
    if (!name.endsWith('.json')) continue;
    const file = join(dir, name);
    let entry: RunEntry;
    try {
      entry = JSON.parse(readFileSync(file, 'utf8')) as RunEntry;
    } catch {
      continue;
    }
    if (entry.host !== host || entry.pid === process.pid || isProcessAlive(entry.pid, entry.start)) continue;
    for (const p of Array.isArray(entry.paths) ? entry.paths : []) {
      if (typeof p !== 'string' || !ownedBy(p, entry.pid)) continue;
      try {
        lstatSync(p);
      } catch {
        continue;
      }
      try {
        rmSync(p, { recursive: true, force: true });
        removed.push(p);
      } catch {
        // Leave what cannot be removed.
      }
    }
    try {
      unlinkSync(file);
    } catch {
      // Another run swept it first.
    }
  }
  return removed;
}

/** The names in `dir`, or none where it cannot be listed. */
function listQuietly(dir: string): string[] {
  try {
    return readdirSync(dir);
  } catch {
    return [];
  }
}

/** Whether `path` is a work folder or lock file made by process `pid`. */
function ownedBy(path: string, pid: number): boolean {
  const name = basename(path);
  const m = WORK_NAME.exec(name);
  if (m) return Number(m[1]) === pid;
  if (name.endsWith('.rowdeck-lock') || name === '.rowdeck-lock') {
    try {
      return (JSON.parse(readFileSync(path, 'utf8')) as { pid?: number }).pid === pid;
    } catch {
      return false;
    }
  }
  return false;
}
