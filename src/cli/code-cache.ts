/**
 * The bundled command line (dist/cli/rowdeck.cjs), compiled with V8's code cache of it
 * (rowdeck.cjs.cache, written by scripts/bundle.mjs). Node 20 keeps no compile cache of its own,
 * and compiling the ~0.7 MB bundle took ~25 ms of every command's start here; a plan runs many
 * short processes one after another. A cache made by another Node or V8 is refused by V8 and the
 * bundle compiles as it would without one.
 */
import { createHash } from 'node:crypto';
import { closeSync, fstatSync, openSync, readFileSync, readSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname } from 'node:path';
import { Script } from 'node:vm';

/** How the bundle is wrapped: as Node wraps a CommonJS module, so the cache is of this text. */
const HEAD = '(function (exports, require, module, __filename, __dirname) {';
const TAIL = '\n})';

export const cacheFileOf = (bundle: string): string => `${bundle}.cache`;

/**
 * The cache file starts with the sha256 of the bundle it was made from: V8 checks only a
 * source's length, and would run a stale cache's code for a bundle changed at the same length.
 */
const digestOf = (bytes: Buffer): Buffer => createHash('sha256').update(bytes).digest();

export interface CompiledBundle {
  script: Script;
  /** 'used', 'refused' (made by another Node or V8), or 'none' (no cache file). */
  cache: 'used' | 'refused' | 'none';
  /** Runs the bundle's top level, as Node runs a CommonJS module's. */
  run(): void;
}

/**
 * The bundle's bytes, read between the wrapper's into one buffer, and that as one string: V8 takes
 * it as it is, where the wrapper joined to the text would be copied twice more (~2 ms here).
 */
function readWrapped(bundle: string): { text: string; bytes: Buffer } {
  const fd = openSync(bundle, 'r');
  try {
    const size = fstatSync(fd).size;
    const buf = Buffer.allocUnsafe(HEAD.length + size + TAIL.length);
    buf.write(HEAD, 0, 'latin1');
    let got = 0;
    for (let n = 1; n > 0 && got < size; got += n) n = readSync(fd, buf, HEAD.length + got, size - got, got);
    const end = buf.write(TAIL, HEAD.length + got, 'latin1') + HEAD.length + got;
    // The bundle is ASCII (scripts/bundle.mjs escapes the rest), so latin1 reads it as V8's one-byte string.
    return { text: buf.toString('latin1', 0, end), bytes: buf.subarray(HEAD.length, HEAD.length + got) };
  } finally {
    closeSync(fd);
  }
}

export function compileBundle(bundle: string, useCache = true): CompiledBundle {
  const { text, bytes } = readWrapped(bundle);
  let file: Buffer | null = null;
  if (useCache) {
    try {
      file = readFileSync(cacheFileOf(bundle));
    } catch {
      file = null;
    }
  }
  const ours = file !== null && file.length > 32 && file.subarray(0, 32).equals(digestOf(bytes));
  const script = new Script(text, { filename: bundle, ...(ours ? { cachedData: file!.subarray(32) } : {}) });
  return {
    script,
    cache: file === null ? 'none' : ours && !script.cachedDataRejected ? 'used' : 'refused',
    run() {
      const module = { exports: {} };
      (script.runInThisContext() as (...a: unknown[]) => void).call(module.exports, module.exports, createRequire(bundle), module, bundle, dirname(bundle));
    },
  };
}

/** A cache file for the bundle: compiled, its top level run (so the cache holds what every command compiles), then cached. */
export function makeCache(bundle: string): Buffer {
  const compiled = compileBundle(bundle, false);
  compiled.run();
  return Buffer.concat([digestOf(readFileSync(bundle)), compiled.script.createCachedData()]);
}
