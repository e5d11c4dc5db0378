/** Small file-system helpers of the output folder's code: quiet removals, listings, checks. */
import { lstatSync, mkdirSync, readdirSync, realpathSync, renameSync, rmdirSync, statSync, unlinkSync } from 'node:fs';
import { dirname, isAbsolute, join, normalize, resolve, sep } from 'node:path';
import { systemError } from '../errors.js';

export function statOrNull(path: string, doing: string): ReturnType<typeof statSync> | null {
  try {
    return statSync(path);
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') return null;
    throw systemError(err, path, doing);
  }
}

export function lstatOrNull(path: string): ReturnType<typeof lstatSync> | null {
  try {
    return lstatSync(path);
  } catch {
    return null;
  }
}

export function realOrSelf(path: string): string {
  try {
    return realpathSync(path);
  } catch {
    return resolve(path);
  }
}

export function makeFolder(path: string, mode: number, doing: string, mayExist = false): void {
  try {
    mkdirSync(path, mode);
  } catch (err) {
    if (mayExist && (err as NodeJS.ErrnoException).code === 'EEXIST' && lstatOrNull(path)?.isDirectory()) return;
    throw systemError(err, path, doing);
  }
}

export function moveFile(from: string, to: string): void {
  try {
    renameSync(from, to);
  } catch (err) {
    throw systemError(err, to, 'moving a finished file into the output folder');
  }
}

export function removeFile(path: string, doing: string): void {
  try {
    unlinkSync(path);
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') return;
    throw systemError(err, path, doing);
  }
}

export function unlinkQuietly(path: string): void {
  try {
    unlinkSync(path);
  } catch {
    // Already gone.
  }
}

export function rmdirQuietly(path: string): void {
  try {
    rmdirSync(path);
  } catch {
    // Not empty, or gone.
  }
}

export function ageMs(path: string): number {
  try {
    return Date.now() - statSync(path).mtimeMs;
  } catch {
    return Infinity;
  }
}

/** Files under `dir` as relative paths, folders walked (in sorted order). */
export function listFiles(dir: string, rel = ''): string[] {
  const files: string[] = [];
  const abs = rel === '' ? dir : join(dir, rel);
  let names: string[];
  try {
    names = readdirSync(abs).sort();
  } catch (err) {
    throw systemError(err, abs, 'listing the finished output');
  }
  for (const n of names) {
    const r = rel === '' ? n : join(rel, n);
    if (lstatSync(join(dir, r)).isDirectory()) files.push(...listFiles(dir, r));
    else files.push(r);
  }
  return files;
}

/** The folders the relative paths lie in (each once, parents before children). */
export function foldersOf(files: string[]): string[] {
  const set = new Set<string>();
  for (const f of files) for (let d = dirname(f); d !== '.' && d !== ''; d = dirname(d)) set.add(d);
  return [...set].sort((a, b) => a.split(sep).length - b.split(sep).length || (a < b ? -1 : 1));
}

export function topName(rel: string): string {
  return rel.split(/[\\/]/)[0]!;
}

export function isSafeRelative(p: string): boolean {
  return p !== '' && !isAbsolute(p) && !normalize(p).split(/[\\/]/).includes('..');
}
