/**
 * Claiming an output folder, and putting a finished output into it without losing anything.
 *
 *   claimOutput ─▶ lock file beside --out (host, process; a dead owner's lock is taken over)
 *               ─▶ what is there: nothing │ an empty folder │ (--force) a previous output of rowdeck
 *               ─▶ a staging folder: beside --out for a new folder (renamed into place at the end),
 *                  inside --out otherwise (its entries moved in at the end, the manifest last)
 *   commit      ─▶ never over anything that appeared meanwhile; the manifest last, so a folder with
 *                  a manifest is always a finished output
 *   release     ─▶ staging, the parent folders this run created (if empty), the lock
 *
 * `--force` replaces only what rowdeck wrote: the files a previous run's manifest lists (and
 * rowdeck's own work files). Anything else in the folder is an error naming it, and nothing is
 * touched. It is refused outright where the folder holds an input, is the working folder, the home
 * folder or one above them, or is a mount point.
 *
 * An existing folder is kept as it is (its mode, owner, group, setgid bit and ACLs): the output is
 * moved into it. A new one is made like `mkdir` makes it (the umask applies).
 */
import { closeSync, mkdirSync, openSync, readdirSync, readFileSync, readSync, renameSync, rmdirSync, rmSync, statSync } from 'node:fs';
import { randomBytes } from 'node:crypto';
import { homedir } from 'node:os';
import { basename, dirname, isAbsolute, join, normalize, relative, resolve, sep } from 'node:path';
import { RowdeckError, systemError } from '../errors.js';
import { removeStaleWorkFolders } from './work-folders.js';
import { acquireLock, STAGE_PREFIX, undoFinishing, type Lock } from './output-lock.js';
import { foldersOf, isSafeRelative, listFiles, lstatOrNull, makeFolder, moveFile, realOrSelf, rmdirQuietly, statOrNull, topName } from './fs-util.js';

/** Names rowdeck itself writes in an output folder (lower case; a split or part must not take them). */
export const RESERVED_OUTPUT_NAMES = ['manifest.json', 'rejected.csv', 'report.html'] as const;

export interface ClaimOptions {
  /** The output folder as given. */
  out: string;
  force: boolean;
  /** Input paths ('-' for standard input), for the --force safety rules. */
  inputs: string[];
  /** Told what was cleaned up on the way (stale work folders, a dead run's lock). */
  notice?: (text: string) => void;
}

export interface OutputClaim {
  /** The output folder, absolute. */
  readonly out: string;
  /** Where the run writes its output; `commit` puts it into place. */
  readonly stage: string;
  /** The lock file held. */
  readonly lockFile: string;
  /**
   * Puts the staged output into place (the manifest last). Returns work folders left to remove
   * (a previous output moved aside), which the caller removes at its pace.
   */
  commit(): string[];
  /** Removes what the claim made and still holds: staging, created parent folders, the lock. Returns the paths removed. */
  release(): string[];
}


/** Claims `o.out` for this run (see the module comment). Throws a coded error, having left nothing, when it cannot. */
export function claimOutput(o: ClaimOptions): OutputClaim {
  const out = resolve(o.out);
  const notice = o.notice ?? ((): void => {});
  const st = statOrNull(out, 'looking at the output folder');
  if (st && !st.isDirectory()) {
    throw new RowdeckError('RDK_OUTPUT_EXISTS', `${out}: exists and is not a folder. Choose another --out path.`, { file: out });
  }
  const parent = dirname(out);
  // A new folder's parents are made now (the lock lives beside the folder) and removed again on failure.
  const created: string[] = [];
  if (!st) makeParents(parent, created);
  let lock: Lock | null = null;
  let stage: string | null = null;
  try {
    lock = acquireLock(out, st !== null, notice);
    const stale = [...removeStaleWorkFolders(parent), ...(st ? removeStaleWorkFolders(out) : [])];
    if (stale.length) notice(`removed work folders left by runs that were killed: ${stale.join(', ')}`);

    // What is there now (with the lock held, no other run changes it).
    const now = statOrNull(out, 'looking at the output folder');
    let old: OldOutput | null = null;
    if (now) {
      if (!now.isDirectory()) throw new RowdeckError('RDK_OUTPUT_EXISTS', `${out}: exists and is not a folder. Choose another --out path.`, { file: out });
      const entries = listOutside(out, lock);
      if (entries.length > 0) {
        if (!o.force) {
          throw new RowdeckError(
            'RDK_OUTPUT_EXISTS',
            `${out}: is not empty (${describeEntries(entries)}). Choose another --out folder, or pass --force to replace a previous output of rowdeck there (only the files its manifest lists are replaced).`,
            { file: out, entries: entries.slice(0, 20) },
          );
        }
        refuseUnsafeForce(out, o.inputs);
        old = readOldOutput(out, lock);
      }
    }
    const tag = `${process.pid}-${randomBytes(4).toString('hex')}`;
    if (now) {
      stage = join(out, `${STAGE_PREFIX}${tag}`);
      makeFolder(stage, 0o700, 'creating a work folder inside the output folder');
    } else {
      stage = join(parent, `${STAGE_PREFIX}${tag}-${basename(out)}`);
      // Like mkdir: the umask applies, and a setgid parent passes its group on.
      makeFolder(stage, 0o777, 'creating a work folder beside the output folder');
    }
    return createClaim(out, stage, lock, old, created);
  } catch (err) {
    if (stage) rmSync(stage, { recursive: true, force: true });
    lock?.release();
    removeCreated(created);
    throw err;
  }
}

// ---- what is in the folder ------------------------------------------------------------------

/** Entries of `dir` other than rowdeck's own work files (staging of this or dead runs is gone by now). */
function listOutside(dir: string, lock: Lock): string[] {
  let names: string[];
  try {
    names = readdirSync(dir);
  } catch (err) {
    throw systemError(err, dir, 'listing the output folder');
  }
  return names.filter((n) => join(dir, n) !== lock.path && !n.startsWith(STAGE_PREFIX)).sort();
}

function describeEntries(entries: string[]): string {
  const shown = entries.slice(0, 5).map((e) => JSON.stringify(e)).join(', ');
  return `${entries.length} entr${entries.length === 1 ? 'y' : 'ies'}: ${shown}${entries.length > 5 ? ', …' : ''}`;
}

interface OldOutput {
  /** Files (relative paths) of the previous output: its manifest and what it lists. */
  files: string[];
}

/**
 * The previous output in `out` (for --force): its manifest must be one rowdeck wrote, and every
 * file in the folder one it lists; otherwise nothing is replaced.
 */
function readOldOutput(out: string, lock: Lock): OldOutput {
  const refuse = (why: string, details: Record<string, unknown> = {}): never => {
    throw new RowdeckError(
      'RDK_FORCE_REFUSED',
      `${out}: ${why} --force replaces only a previous output of rowdeck, and only the files its manifest lists. Nothing was changed. Choose another --out folder, or move those entries away yourself.`,
      { file: out, ...details },
    );
  };
  const manifestPath = join(out, 'manifest.json');
  let text: string;
  try {
    text = readFileSync(manifestPath, 'utf8');
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') return refuse(`holds no manifest.json, so it is not an output of rowdeck (${describeEntries(listOutside(out, lock))}).`);
    throw systemError(err, manifestPath, 'reading the previous manifest');
  }
  let m: { tool?: { name?: unknown }; output?: { parts?: unknown }; input?: { rejectsFile?: unknown } };
  try {
    m = JSON.parse(text) as typeof m;
  } catch {
    return refuse('its manifest.json is not valid JSON, so it cannot tell which files rowdeck wrote.');
  }
  if (m?.tool?.name !== 'rowdeck' || !Array.isArray(m.output?.parts)) return refuse('its manifest.json was not written by rowdeck.');
  const listed = new Set<string>(['manifest.json']);
  for (const p of m.output.parts as { path?: unknown }[]) {
    if (typeof p?.path !== 'string' || !isSafeRelative(p.path)) return refuse(`its manifest.json lists a part outside the folder (${JSON.stringify(p?.path)}).`);
    listed.add(normalize(p.path));
  }
  const rejects = m.input?.rejectsFile;
  if (typeof rejects === 'string' && isSafeRelative(rejects)) listed.add(normalize(rejects));
  // The report page (shuffle --report, rowdeck report) is not in the manifest (it is written
  // after it): it is rowdeck's where its head says rowdeck made it.
  if (isRowdeckReport(join(out, REPORT_NAME))) listed.add(REPORT_NAME);
  const folders = new Set(foldersOf([...listed]));
  const unexpected: string[] = [];
  const files: string[] = [];
  const walk = (rel: string): void => {
    const abs = rel === '' ? out : join(out, rel);
    let names: string[];
    try {
      names = readdirSync(abs);
    } catch (err) {
      throw systemError(err, abs, 'listing the previous output');
    }
    for (const n of names.sort()) {
      const r = rel === '' ? n : join(rel, n);
      if (rel === '' && (join(out, n) === lock.path || n.startsWith(STAGE_PREFIX))) continue;
      const st = lstatOrNull(join(out, r));
      if (!st) continue;
      if (st.isDirectory() && folders.has(r)) walk(r);
      else if (st.isFile() && listed.has(r)) files.push(r);
      else unexpected.push(st.isDirectory() ? `${r}${sep}` : r);
    }
  };
  walk('');
  if (unexpected.length > 0) {
    return refuse(`holds ${unexpected.length} entr${unexpected.length === 1 ? 'y' : 'ies'} its manifest does not list: ${unexpected.slice(0, 10).map((e) => JSON.stringify(e)).join(', ')}${unexpected.length > 10 ? ', …' : ''}.`, { entries: unexpected.slice(0, 50) });
  }
  return { files };
}

const REPORT_NAME = 'report.html';

/** Whether `path` is a page rowdeck rendered (its generator meta tag, in the first KiB). */
function isRowdeckReport(path: string): boolean {
  let fd = -1;
  try {
    fd = openSync(path, 'r');
    const head = Buffer.alloc(1024);
    const n = readSync(fd, head, 0, head.length, 0);
    return /<meta name="generator" content="rowdeck /.test(head.toString('utf8', 0, n));
  } catch {
    return false;
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

/** Refuses --force where replacing could reach the user's own files. */
function refuseUnsafeForce(out: string, inputs: string[]): void {
  const real = realOrSelf(out);
  const refuse = (why: string): never => {
    throw new RowdeckError('RDK_FORCE_REFUSED', `${out}: --force is refused here: ${why} Choose a folder of its own for the output (e.g. --out ${join(out, 'shuffled')}).`, { file: out });
  };
  if (dirname(real) === real) refuse('it is the root of the file system.');
  if (isMountPoint(real)) refuse('it is a mount point.');
  const cwd = realOrSelf(process.cwd());
  if (isWithin(cwd, real)) refuse(cwd === real ? 'it is the working folder.' : `it holds the working folder (${cwd}).`);
  let home: string | null = null;
  try {
    home = realOrSelf(homedir());
  } catch {
    home = null;
  }
  if (home && isWithin(home, real)) refuse(home === real ? 'it is the home folder.' : `it holds the home folder (${home}).`);
  for (const input of inputs) {
    if (input === '-') continue;
    const p = realOrSelf(resolve(input));
    if (isWithin(p, real)) refuse(dirname(p) === real ? `it is the folder of the input ${input}.` : `it holds the input ${input}.`);
  }
}

/** Whether `inner` is `outer` or lies inside it (absolute, resolved paths). */
function isWithin(inner: string, outer: string): boolean {
  const r = relative(outer, inner);
  return r === '' || (!r.startsWith('..') && !isAbsolute(r));
}

function isMountPoint(path: string): boolean {
  try {
    if (statSync(path).dev !== statSync(dirname(path)).dev) return true;
  } catch {
    return false;
  }
  // A bind mount of the same file system has the same device: the mount table tells.
  try {
    const table = readFileSync('/proc/self/mountinfo', 'utf8');
    for (const line of table.split('\n')) {
      const point = line.split(' ')[4];
      if (point !== undefined && unescapeMountPath(point) === path) return true;
    }
  } catch {
    // No mount table here.
  }
  return false;
}

function unescapeMountPath(p: string): string {
  return p.replace(/\\([0-7]{3})/g, (_, o: string) => String.fromCharCode(parseInt(o, 8)));
}

// ---- the claim ------------------------------------------------------------------------------

function createClaim(out: string, stage: string, lock: Lock, old: OldOutput | null, created: string[]): OutputClaim {
  let staged: string | null = stage;
  /** Files moved into an existing folder and not yet made final by the manifest. */
  const moved: string[] = [];
  /** With --force: the previous output's files, moved aside (put back if the run fails before its manifest is in place). */
  let trash: { dir: string; files: string[] } | null = null;
  let held = true;
  return {
    out,
    stage,
    lockFile: lock.path,
    commit() {
      const into = statOrNull(out, 'looking at the output folder');
      if (!into && dirname(stage) === dirname(out)) {
        // A new folder: one rename makes the whole output appear at once. It fails, rather than
        // replace anything, if a folder with entries or a file took the name meanwhile.
        try {
          renameSync(stage, out);
        } catch (err) {
          const code = (err as NodeJS.ErrnoException).code;
          if (code === 'ENOTEMPTY' || code === 'EEXIST' || code === 'ENOTDIR' || code === 'EISDIR') throw appearedError(out, []);
          throw systemError(err, out, 'moving the finished output into place');
        }
        staged = null;
        created.length = 0;
        return [];
      }
      if (!into || !into.isDirectory()) throw appearedError(out, []);
      // An existing folder (or one made meanwhile, while it is empty): the output moves in.
      const allowed = new Set([basename(stage), basename(lock.path), ...(old ? old.files.map(topName) : [])]);
      const stranger = listOutside(out, lock).filter((n) => !allowed.has(n));
      if (stranger.length) throw appearedError(out, stranger);
      if (old) {
        // The previous output must still be only what its manifest lists.
        const again = readOldOutput(out, lock);
        const before = new Set(old.files);
        const added = again.files.filter((f) => !before.has(f));
        if (added.length) throw appearedError(out, added);
      }
      const files = listFiles(stage);
      if (old) {
        // The previous output moves aside, its manifest first: from then on the folder does not
        // look like a finished output. Removed once the new one is in place (put back on failure).
        const dir = join(out, `${STAGE_PREFIX}${process.pid}-${randomBytes(4).toString('hex')}-replaced`);
        makeFolder(dir, 0o700, 'creating a work folder inside the output folder');
        trash = { dir, files: [] };
        for (const f of ['manifest.json', ...old.files.filter((f) => f !== 'manifest.json')]) {
          if (dirname(f) !== '.') makeFolder(join(dir, dirname(f)), 0o700, 'creating a work folder inside the output folder', true);
          moveFile(join(out, f), join(dir, f));
          trash.files.push(f);
        }
        for (const d of foldersOf(old.files).reverse()) rmdirQuietly(join(out, d));
      }
      // Noted only now (the previous output is aside): a later run that finds this lock stale
      // removes exactly these names, which are then this run's files.
      lock.note(files);
      for (const d of foldersOf(files)) makeFolder(join(out, d), 0o777, 'creating a folder in the output folder', true);
      for (const f of files) {
        if (f === 'manifest.json') continue;
        moveFile(join(stage, f), join(out, f));
        moved.push(f);
      }
      // Last: the manifest, which makes the folder a finished output.
      moveFile(join(stage, 'manifest.json'), join(out, 'manifest.json'));
      moved.length = 0;
      rmSync(stage, { recursive: true, force: true });
      staged = null;
      created.length = 0;
      const aside = trash ? [trash.dir] : [];
      trash = null;
      return aside;
    },
    release() {
      const removed: string[] = [];
      // Files that were moved into place before a failure: without a manifest they are not an output.
      if (moved.length) {
        const n = undoFinishing(out, moved.splice(0));
        removed.push(`${n} file(s) moved into ${out}`);
      }
      if (trash) {
        // The previous output goes back where it was.
        for (const f of [...trash.files].reverse()) {
          try {
            if (dirname(f) !== '.') mkdirSync(join(out, dirname(f)), { recursive: true });
            renameSync(join(trash.dir, f), join(out, f));
          } catch {
            // Left in the work folder, which is then kept (see below).
          }
        }
        try {
          if (listFiles(trash.dir).length === 0) rmSync(trash.dir, { recursive: true, force: true });
        } catch {
          // Left for the user to look at.
        }
        trash = null;
      }
      if (staged) {
        try {
          rmSync(staged, { recursive: true, force: true });
          removed.push(staged);
        } catch {
          // Reported by the next run's sweep.
        }
        staged = null;
      }
      // The lock before the folders made for it (it lives in the innermost of them).
      if (held) {
        lock.release();
        held = false;
      }
      removed.push(...removeCreated(created));
      return removed;
    },
  };
}

function appearedError(out: string, entries: string[]): RowdeckError {
  const what = entries.length ? ` (${describeEntries(entries)})` : '';
  return new RowdeckError(
    'RDK_OUTPUT_EXISTS',
    `${out}: something else was written there while this run was working${what}. It was left as it is; this run's output was not put in place. Choose another --out folder.`,
    { file: out, entries: entries.slice(0, 20) },
  );
}

/** Makes `dir` and its missing parents; `created` gets the ones made, outermost first. */
export function makeParents(dir: string, created: string[]): void {
  const missing: string[] = [];
  for (let d = dir; ; d = dirname(d)) {
    if (lstatOrNull(d)) break;
    missing.unshift(d);
    if (dirname(d) === d) break;
  }
  for (const d of missing) {
    try {
      mkdirSync(d, 0o777);
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'EEXIST') continue;
      removeCreated(created);
      throw systemError(err, d, 'creating a folder');
    }
    created.push(d);
  }
}

/** Removes the folders a run created, innermost first, where they are empty; returns those removed. */
export function removeCreated(created: string[]): string[] {
  const removed: string[] = [];
  for (const d of created.splice(0).reverse()) {
    try {
      rmdirSync(d);
      removed.push(d);
    } catch {
      break; // not empty (or not ours any more): its parents are not empty either
    }
  }
  return removed;
}
