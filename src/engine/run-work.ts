/**
 * The places a shuffle works in, and their cleanup whatever happens: the output folder it claims
 * (src/io/output-folder.ts: lock, staging, commit), the spill folder, the record of live runs
 * (src/io/work-folders.ts), and the hooks that clean up on SIGINT, SIGTERM, SIGHUP, SIGQUIT or a
 * crash. A run that replays another (verify --against) has no output folder: only the spill.
 */
import { rm } from 'node:fs/promises';
import { accessSync, constants, mkdtempSync, readdirSync, renameSync, rmSync, statSync, writeSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { RowdeckError, systemError } from '../errors.js';
import { claimOutput, makeParents, removeCreated, type OutputClaim } from '../io/output-folder.js';
import { RunRecord, removeStaleWorkFolders, sweepRunRecords } from '../io/work-folders.js';

export interface RunWorkOptions {
  /** The output folder as given; null: nothing is written but the spill (a replay). */
  out: string | null;
  force: boolean;
  inputs: string[];
  /** The spill's folder (--temp-dir), or null: beside the output (or `spillBeside`). */
  tempDir: string | null;
  /** Where the spill goes by default when there is no output folder. */
  spillBeside?: string;
  /** Told what was cleaned up; the line a signal prints goes here too (default: stderr). */
  notice?: ((text: string) => void) | null;
}

export interface RunWork {
  /** The claimed output (null for a replay). */
  readonly claim: OutputClaim | null;
  /** Where the output is written until commit (null for a replay). */
  readonly stage: string | null;
  readonly spillDir: string;
  /** Starts removing files that are no longer needed; resolves once they are gone (finish waits for them too). */
  removeEarly(files: string[]): Promise<void>;
  /** Puts the finished output into place. */
  commit(): void;
  /** Removes everything left (spill, staging, lock, folders made for nothing); always call it. */
  finish(): Promise<void>;
}

const SIGNALS: NodeJS.Signals[] = ['SIGINT', 'SIGTERM', 'SIGHUP', 'SIGQUIT'];

/**
 * Checks what can be checked of the inputs before any work: each exists, is not a folder, and
 * can be read. Coded errors naming the input.
 */
export function checkInputs(inputs: string[]): void {
  for (const p of inputs) {
    if (p === '-') continue;
    let st;
    try {
      st = statSync(p);
    } catch (err) {
      if ((err as NodeJS.ErrnoException).code === 'ENOENT') {
        throw new RowdeckError('RDK_INPUT_NOT_FOUND', `${p}: no such file. Check the path (it is relative to ${process.cwd()}).`, { file: p });
      }
      throw systemError(err, p, 'looking at an input');
    }
    if (st.isDirectory()) throw new RowdeckError('RDK_IO', `${p}: reading an input failed: it is a folder, not a file. Give the files in it instead (e.g. ${join(p, '*.csv')}).`, { file: p, errno: 'EISDIR', operation: 'reading an input' });
    try {
      accessSync(p, constants.R_OK);
    } catch (err) {
      throw systemError(err, p, 'reading an input');
    }
  }
}

export function startRunWork(o: RunWorkOptions): RunWork {
  const notice = o.notice ?? null;
  const tell = (text: string): void => notice?.(text);
  const record = new RunRecord();
  const createdForSpill: string[] = [];
  const early: Promise<unknown>[] = [];
  let claim: OutputClaim | null = null;
  let spill: string | null = null;
  let aside: string[] = [];
  let done = false;
  let committed = false;

  /** Everything now, synchronously (a failure, a signal, a crash). Returns what was removed. */
  const removeAllNow = (): string[] => {
    const removed: string[] = [];
    let failed = false;
    // Each step on its own: one that fails (worker threads still writing into the spill while a
    // signal removes it) must not keep the others from running.
    const attempt = (step: () => void): void => {
      try {
        step();
      } catch {
        failed = true; // left for the next run's sweep, which the run record points to
      }
    };
    if (spill) {
      const s = spill;
      attempt(() => {
        try {
          rmSync(s, { recursive: true, force: true, maxRetries: 5, retryDelay: 20 });
        } catch {
          // Worker threads still making files in it (a signal mid-run): moved out of their way
          // first (a path they open after this fails), then removed; the name keeps its prefix,
          // so a next run's sweep knows it should this fail too.
          const gone = `${s}.gone`;
          renameSync(s, gone);
          rmSync(gone, { recursive: true, force: true, maxRetries: 5, retryDelay: 20 });
        }
        removed.push(s);
      });
      spill = null;
    }
    for (const a of aside.splice(0)) attempt(() => rmSync(a, { recursive: true, force: true, maxRetries: 5, retryDelay: 20 }));
    if (claim) {
      const c = claim;
      attempt(() => removed.push(...c.release()));
    }
    attempt(() => removed.push(...removeCreated(createdForSpill)));
    if (!failed) attempt(() => record.close());
    return removed;
  };

  const onSignal = (sig: NodeJS.Signals): void => {
    unhook();
    let removed: string[] = [];
    try {
      removed = removeAllNow();
    } finally {
      const whole = committed && claim ? ` after the output was complete in ${claim.out}` : '';
      const line = `stopped by ${sig}${whole}; removed ${removed.length ? removed.join(', ') : 'nothing (no work folders yet)'}`;
      if (notice) notice(line);
      else {
        try {
          writeSync(2, `rowdeck: ${line}\n`);
        } catch {
          // No terminal any more (SIGHUP): nothing to tell.
        }
      }
    }
    // Let the signal do what it would have done.
    process.kill(process.pid, sig);
  };
  const onCrash = (): void => {
    // Only when the exception ends the process (nobody handles it): otherwise the run goes on.
    if (!done && process.listenerCount('uncaughtException') === 0) removeAllNow();
  };
  function unhook(): void {
    for (const s of SIGNALS) process.removeListener(s, onSignal);
    process.removeListener('uncaughtExceptionMonitor', onCrash);
  }
  // Before anything is made: a signal without a listener ends the process at once.
  for (const s of SIGNALS) process.on(s, onSignal);
  // An exception nobody catches ends the process: clean up on the way out.
  process.on('uncaughtExceptionMonitor', onCrash);

  try {
    const swept = sweepRunRecords();
    if (swept.length) tell(`removed work folders left by runs that were killed: ${swept.join(', ')}`);
    claim = o.out !== null ? claimOutput({ out: o.out, force: o.force, inputs: o.inputs, notice: tell }) : null;
    record.add(...(claim ? [claim.lockFile, claim.stage] : []));
    const spillRoot = o.tempDir !== null ? resolve(o.tempDir) : claim ? dirname(claim.out) : resolve(o.spillBeside ?? '.');
    let rootIsFolder: boolean | null = null;
    try {
      rootIsFolder = statSync(spillRoot).isDirectory();
    } catch {
      // Made below (or the making reports why it cannot be).
    }
    if (rootIsFolder === false) {
      throw new RowdeckError('RDK_IO', `${spillRoot}: creating the spill folder failed: it is a file, not a folder. Give --temp-dir a folder (it is made if missing).`, { file: spillRoot, errno: 'ENOTDIR', operation: 'creating the spill folder' });
    }
    makeParents(spillRoot, createdForSpill);
    if (o.tempDir !== null || !claim) {
      const stale = removeStaleWorkFolders(spillRoot);
      if (stale.length) tell(`removed work folders left by runs that were killed: ${stale.join(', ')}`);
    }
    try {
      // Private to this user (mkdtemp makes it 0700): spill holds the data.
      spill = mkdtempSync(join(spillRoot, `.rowdeck-spill-${process.pid}-`));
    } catch (err) {
      throw systemError(err, spillRoot, 'creating the spill folder (--temp-dir)');
    }
    record.add(spill);
  } catch (err) {
    done = true;
    unhook();
    removeAllNow();
    throw err;
  }
  const spillDir = spill;

  return {
    claim,
    stage: claim?.stage ?? null,
    spillDir,
    removeEarly(files) {
      const d = Promise.all(files.map((f) => rm(f, { force: true }).catch(() => {}))).then(() => {});
      early.push(d);
      return d;
    },
    commit() {
      if (!claim) throw new RowdeckError('RDK_INTERNAL', 'commit() of a run without an output folder');
      aside = claim.commit();
      committed = true;
      record.add(...aside);
    },
    async finish() {
      if (done) return;
      done = true;
      try {
        await Promise.all(early.splice(0));
        // Removing a file of a few hundred MB that was just written took ~45 ms here, most of it
        // waiting in the kernel: the files of each folder go concurrently on libuv's thread pool.
        const folders = [...(spill ? [spill] : []), ...aside];
        const files: string[] = [];
        for (const dir of folders) {
          let names: string[] = [];
          try {
            names = readdirSync(dir);
          } catch {
            continue;
          }
          for (const n of names) files.push(join(dir, n));
        }
        await Promise.all(files.map((f) => rm(f, { recursive: true, force: true }).catch(() => {})));
      } finally {
        removeAllNow();
        unhook();
      }
    },
  };
}
