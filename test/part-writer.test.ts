/**
 * The part writer: whatever the slices it is given and however many it gathers before a write,
 * a part holds exactly their bytes in order, and its size and sha256 are those of the file on
 * disk (node:crypto and node:zlib as the references).
 */
import { createHash } from 'node:crypto';
import { readFileSync, type writeSync } from 'node:fs';
import { join } from 'node:path';
import { gunzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { MemberCompressor } from '../src/io/gzip-members.js';
import { FileSlots, PartWriter } from '../src/io/part-writer.js';
import { WRITE_MAX, writeAllSync } from '../src/io/write-all.js';
import { createRandom, makeTempDir, removeDir } from './helpers/engine.js';

let dir: string;
beforeAll(() => {
  dir = makeTempDir();
});
afterAll(() => removeDir(dir));

/** Slices of 1 byte to 200 KiB, mostly short (as a bucket's slice of one of many parts is). */
function makeSlices(seed: number, count: number): Uint8Array[] {
  const rnd = createRandom(seed);
  const source = Buffer.alloc(256 * 1024);
  for (let i = 0; i < source.length; i++) source[i] = Math.floor(rnd() * 256);
  return Array.from({ length: count }, () => {
    const r = rnd();
    const len = r < 0.7 ? 1 + Math.floor(rnd() * 3000) : r < 0.9 ? 1 + Math.floor(rnd() * 40_000) : 1 + Math.floor(rnd() * 200_000);
    const at = Math.floor(rnd() * (source.length - len));
    // A view into a larger buffer, as the dealing's output is: the writer must copy what it keeps.
    return source.subarray(at, at + len);
  });
}

/** A compressor as a run makes one: level 6, members of 64 KiB (several per part here), four in flight. */
const gz = (on: boolean): MemberCompressor | null => (on ? new MemberCompressor(6, 64 * 1024, 4) : null);

async function writeAll(path: string, gzip: boolean, gatherBytes: number, slices: Uint8Array[]): Promise<{ bytes: number; sha256: string }> {
  const w = new PartWriter(path, gz(gzip), gatherBytes);
  for (const s of slices) {
    const writing = w.write(s);
    if (writing) await writing;
  }
  return w.close();
}

describe('PartWriter', () => {
  const slices = makeSlices(7, 400);
  const whole = Buffer.concat(slices);

  it.each([0, 8 * 1024, 64 * 1024, 1 << 20])('gathering up to %i bytes: the bytes in order, their size and sha256', async (gatherBytes) => {
    const path = join(dir, `plain-${gatherBytes}.csv`);
    const r = await writeAll(path, false, gatherBytes, slices);
    const onDisk = readFileSync(path);
    expect(onDisk.equals(whole)).toBe(true);
    expect(r.bytes).toBe(whole.length);
    expect(r.sha256).toBe(createHash('sha256').update(onDisk).digest('hex'));
  });

  it('gzip: the same compressed bytes however the slices were gathered, and they inflate to the slices', async () => {
    const files = [0, 8 * 1024, 64 * 1024].map(async (g) => {
      const path = join(dir, `gz-${g}.csv.gz`);
      const r = await writeAll(path, true, g, slices);
      const onDisk = readFileSync(path);
      expect(r.sha256).toBe(createHash('sha256').update(onDisk).digest('hex'));
      expect(r.bytes).toBe(onDisk.length);
      return onDisk;
    });
    const [a, b, c] = await Promise.all(files);
    expect(gunzipSync(a!).equals(whole)).toBe(true);
    expect(b!.equals(a!)).toBe(true);
    expect(c!.equals(a!)).toBe(true);
  });

  it('gathers short slices: a slice the caller overwrites after write() returned nothing is not changed in the part', async () => {
    const path = join(dir, 'reuse.csv');
    const w = new PartWriter(path, null, 1024);
    const buf = Buffer.from('first,1\n');
    expect(w.write(buf)).toBeUndefined();
    buf.write('XXXXXXX\n');
    const writing = w.write(Buffer.from('second,2\n'));
    if (writing) await writing;
    await w.close();
    expect(readFileSync(path, 'utf8')).toBe('first,1\nsecond,2\n');
  });

  it('many writers sharing 3 open files (closed and reopened to append): every part still holds exactly its bytes', async () => {
    const slots = new FileSlots(3);
    for (const gzip of [false, true]) {
      const writers = Array.from({ length: 12 }, (_, k) => new PartWriter(join(dir, `slot-${gzip}-${k}.csv${gzip ? '.gz' : ''}`), gz(gzip), k % 2 ? 4096 : 0, slots));
      expect(slots.openCount).toBeLessThanOrEqual(3);
      const own = writers.map(() => [] as Uint8Array[]);
      // Round robin over the parts, as the dealing writes a bucket's slices part after part.
      slices.slice(0, 240).forEach((s, i) => own[i % writers.length]!.push(s));
      for (let i = 0; i < 20; i++) {
        for (let k = 0; k < writers.length; k++) {
          const writing = writers[k]!.write(own[k]![i]!);
          if (writing) await writing;
          expect(slots.openCount).toBeLessThanOrEqual(3);
        }
      }
      for (let k = 0; k < writers.length; k++) {
        const r = await writers[k]!.close();
        const onDisk = readFileSync(writers[k]!.path!);
        expect((gzip ? gunzipSync(onDisk) : onDisk).equals(Buffer.concat(own[k]!))).toBe(true);
        expect(r.sha256).toBe(createHash('sha256').update(onDisk).digest('hex'));
      }
      expect(slots.openCount).toBe(0);
    }
  });

  it('a writer without a path writes nothing and gives the bytes and sha256 a real one writes', async () => {
    for (const gzip of [false, true]) {
      const real = await writeAll(join(dir, `real-${gzip}.csv`), gzip, 8 * 1024, slices);
      const w = new PartWriter(null, gz(gzip), 8 * 1024);
      for (const s of slices) {
        const writing = w.write(s);
        if (writing) await writing;
      }
      expect(await w.close()).toEqual(real);
    }
  });

  it('a writer told not to hash (a gather task\'s piece) writes the same bytes and gives no sha256', async () => {
    const path = join(dir, 'piece.bin');
    const w = new PartWriter(path, null, 64 * 1024, null, false);
    for (const s of slices) {
      const writing = w.write(s);
      if (writing) await writing;
    }
    expect(await w.close()).toEqual({ bytes: whole.length, sha256: '' });
    expect(readFileSync(path).equals(whole)).toBe(true);
  });
});

describe('writeAllSync', () => {
  /** A writer that keeps what it is given and, every third call, takes only part of it (as a full disk or a signal may). */
  function recorder(): { write: typeof writeSync; calls: { length: number; position: number | null }[]; file: Map<number, number> } {
    const calls: { length: number; position: number | null }[] = [];
    const file = new Map<number, number>();
    let at = 0;
    const write = ((_fd: number, buf: Uint8Array, offset: number, length: number, position: number | null) => {
      calls.push({ length, position });
      const n = calls.length % 3 === 0 ? Math.max(1, length >> 1) : length;
      const from = position ?? at;
      for (let i = 0; i < n; i++) file.set(from + i, buf[offset + i]!);
      if (position === null) at += n;
      return n;
    }) as typeof writeSync;
    return { write, calls, file };
  }

  it('writes every byte where it belongs, in pieces of at most WRITE_MAX (large writes get large page-cache folios)', () => {
    const random = createRandom(3);
    const buf = Uint8Array.from({ length: 5 * WRITE_MAX + 12_345 }, () => Math.floor(random() * 256));
    for (const position of [null, 7_000_000]) {
      const r = recorder();
      writeAllSync(1, buf, position, r.write);
      expect(r.calls.length).toBeGreaterThan(6);
      for (const c of r.calls) expect(c.length).toBeLessThanOrEqual(WRITE_MAX);
      const base = position ?? 0;
      expect(r.file.size).toBe(buf.length);
      for (let i = 0; i < buf.length; i += 997) expect(r.file.get(base + i)).toBe(buf[i]);
      expect(r.file.get(base + buf.length - 1)).toBe(buf[buf.length - 1]);
      // Positions follow the bytes written, short writes included.
      if (position !== null) expect(r.calls.every((c, k) => k === 0 || c.position! > r.calls[k - 1]!.position!)).toBe(true);
    }
  });
});
