/**
 * How a cluster task leaves its work in the shared folder so that retries are safe: everything
 * is written into a private folder (`.NNNN.<host>.<pid>.tmp`) and renamed into place once
 * complete, with a small done record (`done.json`) inside. No task appends to or edits a file
 * another task wrote. A task killed at any moment leaves only its private folder, which the next
 * run of the same task removes; two runs of one task at once both work, and the second to finish
 * finds the first's folder in place and drops its own. A failure is kept beside the folder
 * (`NNNN.failed.json`) for `rowdeck status`, and removed by the run that succeeds.
 */
import { existsSync, mkdirSync, readdirSync, readFileSync, renameSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { hostname } from 'node:os';
import { join } from 'node:path';
import { RowdeckError, systemError, toWire, type WireError } from '../errors.js';

/** This host's name as it goes into file names (no dots: they separate a name's fields). */
const HOST = hostname().replace(/[^A-Za-z0-9_-]/g, '_');

/** Typed arrays as JSON: `{ "$f64": base64 }`, `{ "$u32": base64 }`, `{ "$i32": base64 }`. */
export function encodeJson(value: unknown): string {
  return JSON.stringify(value, (_k, v: unknown) => {
    if (v instanceof Float64Array) return { $f64: Buffer.from(v.buffer, v.byteOffset, v.byteLength).toString('base64') };
    if (v instanceof Uint32Array) return { $u32: Buffer.from(v.buffer, v.byteOffset, v.byteLength).toString('base64') };
    if (v instanceof Int32Array) return { $i32: Buffer.from(v.buffer, v.byteOffset, v.byteLength).toString('base64') };
    return v;
  });
}

export function decodeJson<T>(text: string): T {
  return JSON.parse(text, (_k, v: unknown) => {
    if (v && typeof v === 'object' && !Array.isArray(v)) {
      const o = v as Record<string, string>;
      const bytes = (s: string): Buffer => {
        const b = Buffer.from(s, 'base64');
        // A typed array needs its own aligned buffer.
        return Buffer.from(b);
      };
      if (typeof o.$f64 === 'string') {
        const b = bytes(o.$f64);
        return new Float64Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.length));
      }
      if (typeof o.$u32 === 'string') {
        const b = bytes(o.$u32);
        return new Uint32Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.length));
      }
      if (typeof o.$i32 === 'string') {
        const b = bytes(o.$i32);
        return new Int32Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.length));
      }
    }
    return v;
  }) as T;
}

/** Writes a whole file under a temporary name, then renames it into place. */
export function writeFileAtomic(path: string, text: string): void {
  const tmp = `${path}.${HOST}.${process.pid}.tmp`;
  try {
    writeFileSync(tmp, text);
    renameSync(tmp, path);
  } catch (err) {
    rmSync(tmp, { force: true });
    throw systemError(err, path, 'writing a work file');
  }
}

/** `reread`: a scatter task's slices read again from the start the chain gives (deal.ts), in a folder of its own. */
export type StageName = 'scatter' | 'reread' | 'deal' | 'gather';

/** What every done record holds besides the stage's own figures. */
export interface DoneRecord {
  planId: string;
  stage: StageName;
  index: number;
  host: string;
  pid: number;
  startedAt: string;
  endedAt: string;
}

export interface FailedRecord {
  planId: string;
  stage: StageName;
  index: number;
  host: string;
  pid: number;
  at: string;
  error: WireError;
}

export const taskName = (index: number): string => String(index).padStart(4, '0');

/** The folder of a stage's task in the work folder (deal: its one task). */
export function taskDir(work: string, stage: StageName, index: number): string {
  return join(work, stage, taskName(index));
}

/** The done record of a finished task, or null. */
export function readDone<T extends DoneRecord>(work: string, stage: StageName, index: number): T | null {
  const path = join(taskDir(work, stage, index), 'done.json');
  if (!existsSync(path)) return null;
  try {
    return decodeJson<T>(readFileSync(path, 'utf8'));
  } catch (err) {
    throw systemError(err, path, 'reading a done record');
  }
}

export function readFailed(work: string, stage: StageName, index: number): FailedRecord | null {
  const path = join(work, stage, `${taskName(index)}.failed.json`);
  if (!existsSync(path)) return null;
  try {
    return JSON.parse(readFileSync(path, 'utf8')) as FailedRecord;
  } catch {
    return null;
  }
}

/** Private folders of runs of this task that are not running here now (another host's are left). */
function removeDeadAttempts(work: string, stage: StageName, index: number): void {
  const folder = join(work, stage);
  const prefix = `.${taskName(index)}.`;
  let names: string[] = [];
  try {
    names = readdirSync(folder);
  } catch {
    return;
  }
  for (const name of names) {
    if (!name.startsWith(prefix) || !name.endsWith('.tmp')) continue;
    const [, host, pid] = name.slice(1, -4).split('.');
    if (host !== HOST || Number(pid) === process.pid) continue;
    let alive = false;
    try {
      process.kill(Number(pid), 0);
      alive = true;
    } catch (err) {
      alive = (err as NodeJS.ErrnoException).code === 'EPERM';
    }
    if (!alive) rmSync(join(folder, name), { recursive: true, force: true });
  }
}

/**
 * Runs one task: `work(dir)` fills a private folder, and returns the stage's figures; the done
 * record goes in last, and the folder is renamed into place. Returns false when the task was
 * already done (by an earlier run, or by a run beside this one).
 */
export async function runTask<T extends object>(work: string, stage: StageName, index: number, planId: string, body: (dir: string) => Promise<T>): Promise<boolean> {
  const folder = join(work, stage);
  const final = taskDir(work, stage, index);
  const failedPath = join(folder, `${taskName(index)}.failed.json`);
  if (existsSync(join(final, 'done.json'))) return false;
  mkdirSync(folder, { recursive: true });
  removeDeadAttempts(work, stage, index);
  const dir = join(folder, `.${taskName(index)}.${HOST}.${process.pid}.tmp`);
  rmSync(dir, { recursive: true, force: true });
  mkdirSync(dir);
  const startedAt = new Date().toISOString();
  try {
    const figures = await body(dir);
    const done: DoneRecord = { planId, stage, index, host: hostname(), pid: process.pid, startedAt, endedAt: new Date().toISOString() };
    writeFileSync(join(dir, 'done.json'), encodeJson({ ...done, ...figures }));
    try {
      // A folder left by a run killed after its rename but without a done record is not done: replace it.
      if (existsSync(final) && !existsSync(join(final, 'done.json'))) rmSync(final, { recursive: true, force: true });
      renameSync(dir, final);
    } catch (err) {
      const code = (err as NodeJS.ErrnoException).code;
      // Another run of this task finished first: its output stands (it is the same).
      if ((code === 'ENOTEMPTY' || code === 'EEXIST') && existsSync(join(final, 'done.json'))) {
        rmSync(dir, { recursive: true, force: true });
        return false;
      }
      throw systemError(err, final, 'putting a finished task into place');
    }
    rmSync(failedPath, { force: true });
    return true;
  } catch (err) {
    rmSync(dir, { recursive: true, force: true });
    const failed: FailedRecord = { planId, stage, index, host: hostname(), pid: process.pid, at: new Date().toISOString(), error: toWire(err) };
    try {
      writeFileAtomic(failedPath, JSON.stringify(failed, null, 2) + '\n');
    } catch {
      // The error that stopped the task is the one to report.
    }
    throw err;
  }
}

/** Whether a private folder of this task exists (a run in progress, or one killed). */
export function attempts(work: string, stage: StageName, index: number): string[] {
  const prefix = `.${taskName(index)}.`;
  try {
    return readdirSync(join(work, stage)).filter((n) => n.startsWith(prefix) && n.endsWith('.tmp'));
  } catch {
    return [];
  }
}

/** The size and modification time of a file, as plan.json records them. */
export function fileStamp(path: string): { bytes: number; mtimeMs: number } {
  const st = statSync(path);
  return { bytes: st.size, mtimeMs: Math.floor(st.mtimeMs) };
}

export function internal(message: string): RowdeckError {
  return new RowdeckError('RDK_INTERNAL', message);
}
