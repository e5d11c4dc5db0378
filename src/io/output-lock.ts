/**
 * The lock that makes one run the only writer of an output folder: a file beside the folder (or,
 * where its parent takes no files, inside it) holding the owner's host, process and start time.
 * It is written whole (linked or renamed into place), taken over when its owner is dead on this
 * host (a reused process id is told apart by the process's start time), and, while an output is
 * being moved into place, notes the files being moved, so a run killed then is undone by the next.
 */
import { closeSync, linkSync, mkdirSync, openSync, readdirSync, readFileSync, renameSync, rmSync, unlinkSync, writeFileSync, writeSync } from 'node:fs';
import { randomBytes } from 'node:crypto';
import { hostname } from 'node:os';
import { basename, dirname, join } from 'node:path';
import { RowdeckError, systemError } from '../errors.js';
import { isProcessAlive, readProcessStart } from './work-folders.js';
import { ageMs, foldersOf, isSafeRelative, listFiles, lstatOrNull, rmdirQuietly, unlinkQuietly } from './fs-util.js';

/** The lock file inside an output folder whose parent cannot hold one. */
export const INSIDE_LOCK = '.rowdeck-lock';
/** Names of rowdeck's staging folders (and its lock's work files) start so. */
export const STAGE_PREFIX = '.rowdeck-partial-';

export interface LockContent {
  pid: number;
  host: string;
  start: string | null;
  startedAt: string;
  out: string;
  /** While the output is moved into an existing folder: the files (relative to it) that are rowdeck's. */
  finishing?: string[];
}

export interface Lock {
  readonly path: string;
  /** Rewrites the lock with a note of the files being moved into place. */
  note(finishing: string[]): void;
  release(): void;
}

export function acquireLock(out: string, exists: boolean, notice: (text: string) => void): Lock {
  const beside = join(dirname(out), `.${basename(out) || 'root'}.rowdeck-lock`);
  const me: LockContent = { pid: process.pid, host: hostname(), start: readProcessStart(process.pid), startedAt: new Date().toISOString(), out };
  let path = beside;
  try {
    takeLockFile(beside, me, out, notice);
  } catch (err) {
    // An existing folder whose parent cannot hold a file (the root of a mounted disk, say):
    // the lock goes inside it.
    if (!exists || !(err instanceof RowdeckError) || err.code !== 'RDK_PERMISSION') throw err;
    path = join(out, INSIDE_LOCK);
    takeLockFile(path, me, out, notice);
  }
  // A run that had to lock inside (or beside) must not be missed by one that locks the other way.
  const other = path === beside ? join(out, INSIDE_LOCK) : beside;
  const held = readLock(other);
  if (held && held !== 'unreadable' && !isStale(held)) {
    unlinkQuietly(path);
    throw lockedError(out, other, held);
  }
  let content = me;
  return {
    path,
    note(finishing) {
      content = { ...me, finishing };
      writeLockFile(path, content, 'w');
    },
    release() {
      unlinkQuietly(path);
    },
  };
}

/** Creates the lock file exclusively; takes over a lock whose owner is dead. */
function takeLockFile(path: string, me: LockContent, out: string, notice: (text: string) => void): void {
  for (let attempt = 0; ; attempt++) {
    try {
      writeLockFile(path, me, 'wx');
      return;
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code !== 'EEXIST' || attempt >= 5) {
        throw err instanceof RowdeckError ? err : systemError(err, path, 'creating the lock file of the output folder');
      }
    }
    const held = readLock(path);
    if (held === null) continue; // gone meanwhile
    if (held === 'unreadable') {
      // Being written by a run that is starting, or left empty by one killed right then.
      if (ageMs(path) < 10_000) throw lockedError(out, path, null);
      breakLock(path, null);
      continue;
    }
    if (!isStale(held)) throw lockedError(out, path, held);
    if (breakLock(path, held)) {
      const undone = held.finishing && held.out === out ? undoFinishing(out, held.finishing) : 0;
      const restored = restoreReplaced(out, held.pid);
      notice(
        `took over the lock of run ${held.pid}, which ended without releasing it${undone ? `, removed the ${undone} file(s) of its unfinished output` : ''}${restored ? `, put back the ${restored} file(s) of the output it was replacing` : ''}`,
      );
    }
  }
}

/**
 * Writes the lock whole: its content goes to a work file first, which is then linked to the lock's
 * name ('wx': fails with EEXIST if a lock is there) or renamed over it ('w'), so no reader ever
 * sees it empty or half written. Where the file system has no hard links, it is created and
 * written in place.
 */
function writeLockFile(path: string, content: LockContent, flag: 'wx' | 'w'): void {
  // Named like a work folder of this process, so a sweep removes it if the process dies here.
  const temp = join(dirname(path), `${STAGE_PREFIX}${process.pid}-lock-${randomBytes(4).toString('hex')}`);
  try {
    writeFileSync(temp, JSON.stringify(content) + '\n', { flag: 'wx', mode: 0o644 });
  } catch (err) {
    unlinkQuietly(temp);
    throw lockWriteError(err, path);
  }
  try {
    if (flag === 'w') renameSync(temp, path);
    else linkSync(temp, path);
  } catch (err) {
    const code = (err as NodeJS.ErrnoException).code;
    unlinkQuietly(temp);
    if (code === 'EEXIST') throw err;
    if (flag === 'wx' && (code === 'EPERM' || code === 'ENOTSUP' || code === 'ENOSYS' || code === 'EOPNOTSUPP')) {
      writeLockInPlace(path, content);
      return;
    }
    throw lockWriteError(err, path);
  }
  unlinkQuietly(temp);
}

function writeLockInPlace(path: string, content: LockContent): void {
  let fd: number;
  try {
    fd = openSync(path, 'wx', 0o644);
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'EEXIST') throw err;
    throw lockWriteError(err, path);
  }
  try {
    writeSync(fd, JSON.stringify(content) + '\n');
  } catch (err) {
    closeSync(fd);
    unlinkQuietly(path);
    throw lockWriteError(err, path);
  }
  closeSync(fd);
}

function lockWriteError(err: unknown, path: string): RowdeckError {
  const code = (err as NodeJS.ErrnoException).code;
  if (code === 'ENOENT' && lstatOrNull(dirname(path))?.isDirectory()) {
    // The folder is there but takes no new files: /proc, /sys and the like.
    return new RowdeckError('RDK_IO', `${path}: creating the lock file of the output folder failed: ${dirname(path)} cannot hold new files (a special file system such as /proc or /sys?). Choose an ordinary folder for --out.`, { file: path, errno: code, operation: 'creating the lock file' });
  }
  return systemError(err, path, 'creating the lock file of the output folder');
}

/** The lock's content, 'unreadable' (empty or damaged), or null when there is none. */
function readLock(path: string): LockContent | 'unreadable' | null {
  let text: string;
  try {
    text = readFileSync(path, 'utf8');
  } catch (err) {
    return (err as NodeJS.ErrnoException).code === 'ENOENT' ? null : 'unreadable';
  }
  try {
    const c = JSON.parse(text) as LockContent;
    return typeof c.pid === 'number' && typeof c.host === 'string' ? c : 'unreadable';
  } catch {
    return 'unreadable';
  }
}

/** A lock is stale when its owner ran on this host and is gone (or its process id was reused). */
function isStale(held: LockContent): boolean {
  return held.host === hostname() && held.pid !== process.pid && !isProcessAlive(held.pid, held.start);
}

/**
 * Removes a stale lock: moved aside first, so that of two runs taking over at once only one
 * removes it, and a lock made meanwhile by a live run is put back.
 */
function breakLock(path: string, held: LockContent | null): boolean {
  const aside = `${path}.stale-${process.pid}`;
  try {
    renameSync(path, aside);
  } catch {
    return false;
  }
  const moved = readLock(aside);
  const same = held === null ? moved === 'unreadable' || moved === null : moved !== null && moved !== 'unreadable' && moved.pid === held.pid && moved.startedAt === held.startedAt;
  if (!same) {
    try {
      linkSync(aside, path);
    } catch {
      // A newer lock is in place already.
    }
  }
  unlinkQuietly(aside);
  return same;
}

function lockedError(out: string, lockPath: string, held: LockContent | null): RowdeckError {
  const who = held ? `run ${held.pid} on ${held.host}, started ${held.startedAt}` : 'a run that is starting';
  const remote = held && held.host !== hostname() ? ` If no such run is going on ${held.host}, remove ${lockPath}.` : '';
  return new RowdeckError(
    'RDK_OUTPUT_LOCKED',
    `${out}: another rowdeck run is writing this output folder (${who}; lock file ${lockPath}). Wait for it to finish, or choose another --out folder.${remote}`,
    { file: out, lock: lockPath, ...(held ? { pid: held.pid, host: held.host } : {}) },
  );
}

/** A dead run was moving its output into `out`: its files there (none of them the user's) are removed, unless it got as far as its manifest. */
export function undoFinishing(out: string, files: string[]): number {
  if (lstatOrNull(join(out, 'manifest.json'))) return 0;
  let n = 0;
  for (const f of files) {
    if (!isSafeRelative(f)) continue;
    try {
      unlinkSync(join(out, f));
      n++;
    } catch {
      // Not there (not moved yet, or removed already).
    }
  }
  for (const d of foldersOf(files).reverse()) rmdirQuietly(join(out, d));
  return n;
}

/** A dead run had moved the previous output aside (--force) and died before its manifest: the previous output goes back. */
function restoreReplaced(out: string, pid: number): number {
  if (lstatOrNull(join(out, 'manifest.json'))) return 0;
  let n = 0;
  let names: string[] = [];
  try {
    names = readdirSync(out);
  } catch {
    return 0;
  }
  for (const name of names) {
    if (!name.startsWith(`${STAGE_PREFIX}${pid}-`) || !name.endsWith('-replaced')) continue;
    const dir = join(out, name);
    for (const f of listFiles(dir)) {
      try {
        if (dirname(f) !== '.') mkdirSync(join(out, dirname(f)), { recursive: true });
        renameSync(join(dir, f), join(out, f));
        n++;
      } catch {
        // Left in place; the sweep then keeps the folder only if it cannot remove it.
      }
    }
    rmSync(dir, { recursive: true, force: true });
  }
  return n;
}
