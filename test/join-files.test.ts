/**
 * Joining a plan's part from its gather tasks' files (src/io/join-files.ts): the bytes in order,
 * and the sha256 of the whole, checked against FIPS 180-2's published example (SHA-256 of "abc",
 * appendix B.1).
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { RowdeckError } from '../src/errors.js';
import { joinFiles } from '../src/io/join-files.js';
import { makeTempDir, removeDir } from './helpers/engine.js';

let dir: string;
beforeAll(() => (dir = makeTempDir()));
afterAll(() => removeDir(dir));

describe('joining a part from files', () => {
  it('writes the header then every file in order, and hashes the whole (FIPS 180-2, B.1: SHA-256("abc"))', () => {
    const files = ['b', '', 'c'].map((text, i) => {
      const path = join(dir, `piece-${i}`);
      writeFileSync(path, text);
      return path;
    });
    const out = join(dir, 'abc.csv');
    // A two-byte buffer: every piece crosses a buffer's end.
    const r = joinFiles({ out, header: Buffer.from('a'), files }, Buffer.alloc(2));
    expect(readFileSync(out, 'latin1')).toBe('abc');
    expect(r).toEqual({ kind: 'joined', bytes: 3, sha256: 'ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad' });
  });

  it('never writes over a file, and names a missing piece', () => {
    const out = join(dir, 'taken.csv');
    writeFileSync(out, 'mine');
    expect(() => joinFiles({ out, header: null, files: [] })).toThrow(RowdeckError);
    expect(readFileSync(out, 'latin1')).toBe('mine');
    const missing = join(dir, 'gone.bin');
    expect(() => joinFiles({ out: join(dir, 'new.csv'), header: null, files: [missing] })).toThrow(missing);
  });
});
