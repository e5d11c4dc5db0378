/**
 * gzip parts as members of a fixed size (src/io/gzip-members.ts, docs/manifest.md "gzip parts").
 *
 * References from outside the code under test: RFC 1952 section 2.2 (a gzip file is a series of
 * members, each a header, deflate data and a trailer), node:zlib's one-shot gzipSync as the
 * compressor of each member and gunzipSync as a reader of the whole file, and the system's GNU
 * `gzip -dc` as a second reader (when missing, the checks that need it skip with one line).
 */
import { spawnSync } from 'node:child_process';
import { mkdirSync, readdirSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gunzipSync, gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { finishCluster } from '../src/cluster/finish.js';
import { runDealTask } from '../src/cluster/deal.js';
import { runGatherTask } from '../src/cluster/gather-task.js';
import { loadPlan, planCluster } from '../src/cluster/plan.js';
import { runScatterTask } from '../src/cluster/scatter-task.js';
import { replayable } from '../src/engine/replay.js';
import { GzipMembers, keepBytesFor, MemberCompressor, memberBytesFor } from '../src/io/gzip-members.js';
import { PartWriter } from '../src/io/part-writer.js';
import { shuffle, verify, type Manifest, type ShuffleOptions } from '../src/index.js';
import { manifestBody, rowdeck } from './helpers/cluster.js';
import { createRandom, makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

const KiB = 1024;
const MiB = 1024 * 1024;
const GiB = 1024 * MiB;

/** GNU gzip, if the system has it. */
const systemGzip = spawnSync('gzip', ['--version'], { encoding: 'utf8' }).status === 0;
if (!systemGzip) console.log('gzip-parts: the checks with the system gzip skip: no gzip on the PATH (Debian: apt-get install gzip)');

/** The bytes the system gzip inflates a file to. */
function systemGunzip(file: Buffer): Buffer {
  const r = spawnSync('gzip', ['-dc'], { input: file, maxBuffer: 1 << 30 });
  expect(r.status, r.stderr?.toString()).toBe(0);
  return r.stdout;
}

/** What the layout says a part's file holds: gzipSync of each member's bytes, one after another. */
function membersOf(data: Buffer, memberBytes: number, level: number): Buffer {
  const out: Buffer[] = [];
  for (let at = 0; at < data.length || out.length === 0; at += memberBytes) out.push(gzipSync(data.subarray(at, at + memberBytes), { level }));
  return Buffer.concat(out);
}

/** Slices of 1 byte to ~300 KiB of varied text, mostly short, as views into a larger buffer. */
function makeSlices(seed: number, count: number): Uint8Array[] {
  const rnd = createRandom(seed);
  const source = Buffer.from(makeSensorCsv({ rows: 20000, seed }));
  return Array.from({ length: count }, () => {
    const r = rnd();
    const len = r < 0.7 ? 1 + Math.floor(rnd() * 3000) : r < 0.95 ? 1 + Math.floor(rnd() * 40_000) : 1 + Math.floor(rnd() * 300_000);
    const at = Math.floor(rnd() * (source.length - len));
    return source.subarray(at, at + len);
  });
}

let dir: string;
beforeAll(() => {
  dir = makeTempDir('rowdeck-gzip-');
});
afterAll(() => removeDir(dir));

async function writeThrough(w: PartWriter, slices: Uint8Array[]): Promise<{ bytes: number; sha256: string }> {
  for (const s of slices) {
    const writing = w.write(s);
    if (writing) await writing;
  }
  return w.close();
}

describe('the member size', () => {
  it('is 1 MiB up to 16 parts, halved as the parts double, 64 KiB from 129 parts', () => {
    const table: [number, number][] = [[1, MiB], [16, MiB], [17, 512 * KiB], [32, 512 * KiB], [33, 256 * KiB], [64, 256 * KiB], [65, 128 * KiB], [128, 128 * KiB], [129, 64 * KiB], [10000, 64 * KiB]];
    for (const [parts, m] of table) expect(memberBytesFor(parts), `${parts} parts`).toBe(m);
    // The unfinished members of all parts stay within 16 MiB wherever the floor allows.
    for (let parts = 1; parts <= 128; parts++) expect(memberBytesFor(parts) * parts).toBeLessThanOrEqual(16 * MiB);
  });
});

describe('a gzip part', () => {
  const slices = makeSlices(11, 300);
  const whole = Buffer.concat(slices.map((s) => Buffer.from(s)));

  it('is the members of its bytes at fixed offsets, whatever the member size, places in flight and gathering', async () => {
    expect(whole.length).toBeGreaterThan(3 * MiB);
    for (const [memberBytes, limit, gatherBytes] of [[MiB, 1, 0], [MiB, 8, 64 * KiB], [256 * KiB, 2, 8 * KiB], [64 * KiB, 3, 0]] as const) {
      const path = join(dir, `layout-${memberBytes}-${limit}-${gatherBytes}.csv.gz`);
      const r = await writeThrough(new PartWriter(path, new MemberCompressor(6, memberBytes, limit), gatherBytes), slices);
      const file = readFileSync(path);
      expect(file.equals(membersOf(whole, memberBytes, 6)), `members of ${memberBytes}`).toBe(true);
      expect(r.bytes).toBe(file.length);
      // Both readers take the members as one stream (RFC 1952 section 2.2).
      expect(gunzipSync(file).equals(whole)).toBe(true);
      if (systemGzip) expect(systemGunzip(file).equals(whole)).toBe(true);
    }
  });

  it('is the same bytes however the data was cut into writes', async () => {
    const one = await writeThrough(new PartWriter(join(dir, 'cut-whole.gz'), new MemberCompressor(6, 256 * KiB, 4)), [whole]);
    const bytewise = whole.subarray(0, 300 * KiB);
    const rest = whole.subarray(300 * KiB);
    const ragged = [...Array.from({ length: Math.ceil(bytewise.length / 1000) }, (_, i) => bytewise.subarray(i * 1000, (i + 1) * 1000)), rest];
    const two = await writeThrough(new PartWriter(join(dir, 'cut-ragged.gz'), new MemberCompressor(6, 256 * KiB, 4)), ragged);
    expect(two).toEqual(one);
    expect(readFileSync(join(dir, 'cut-ragged.gz')).equals(readFileSync(join(dir, 'cut-whole.gz')))).toBe(true);
  });

  it('at each level: that level\'s members, smaller as the level rises on this data', async () => {
    const sizes: number[] = [];
    for (const level of [1, 6, 9]) {
      const path = join(dir, `level-${level}.gz`);
      const r = await writeThrough(new PartWriter(path, new MemberCompressor(level, MiB, 4)), slices);
      expect(readFileSync(path).equals(membersOf(whole, MiB, level)), `level ${level}`).toBe(true);
      sizes.push(r.bytes);
    }
    expect(sizes[0]).toBeGreaterThan(sizes[1]!);
    expect(sizes[1]).toBeGreaterThanOrEqual(sizes[2]!);
  });

  it('of no bytes is one empty member; of exactly one member\'s bytes, one member; one byte more, two', async () => {
    const cases: [string, Buffer, number][] = [
      ['empty', Buffer.alloc(0), 1],
      ['exact', whole.subarray(0, 64 * KiB), 1],
      ['one-more', whole.subarray(0, 64 * KiB + 1), 2],
    ];
    for (const [name, data, members] of cases) {
      const path = join(dir, `edge-${name}.gz`);
      await writeThrough(new PartWriter(path, new MemberCompressor(6, 64 * KiB, 2)), data.length ? [data] : []);
      const file = readFileSync(path);
      const expected = Buffer.concat(Array.from({ length: members }, (_, k) => gzipSync(data.subarray(k * 64 * KiB, (k + 1) * 64 * KiB))));
      expect(file.equals(expected), name).toBe(true);
      expect(gunzipSync(file).equals(data), name).toBe(true);
      if (systemGzip) expect(systemGunzip(file).equals(data), name).toBe(true);
    }
    // RFC 1952 section 2.3.1: an empty member is its 10-byte header, an empty deflate block and an 8-byte trailer.
    expect(readFileSync(join(dir, 'edge-empty.gz')).subarray(0, 3)).toEqual(Buffer.from([0x1f, 0x8b, 8]));
  });

  it('keeps no more members in flight over all parts than the compressor allows, and writes each part in order', async () => {
    const c = new MemberCompressor(6, 64 * KiB, 2);
    const writers = Array.from({ length: 5 }, (_, k) => new PartWriter(join(dir, `bound-${k}.gz`), c));
    const own = writers.map(() => [] as Uint8Array[]);
    slices.forEach((s, i) => own[i % writers.length]!.push(s));
    let most = 0;
    for (let i = 0; i < 60; i++) {
      for (let k = 0; k < writers.length; k++) {
        const writing = writers[k]!.write(own[k]![i]!);
        most = Math.max(most, c.inFlight);
        if (writing) await writing;
        most = Math.max(most, c.inFlight);
      }
    }
    await Promise.all(writers.map((w) => w.close()));
    expect(most).toBe(2);
    expect(c.inFlight).toBe(0);
    writers.forEach((w, k) => {
      const mine = Buffer.concat(own[k]!.slice(0, 60).map((s) => Buffer.from(s)));
      expect(readFileSync(w.path!).equals(membersOf(mine, 64 * KiB, 6)), `part ${k}`).toBe(true);
    });
  });

  it('with a small share of memory a part parks its unfinished member in a file: the same bytes, and the file goes with the last part', async () => {
    const parkDir = join(dir, 'park');
    mkdirSync(parkDir);
    const c = new MemberCompressor(6, 64 * KiB, 2, { dir: parkDir, keepBytes: 8 * KiB });
    expect(c.keepBytes).toBe(8 * KiB);
    const writers = Array.from({ length: 3 }, (_, k) => new PartWriter(join(dir, `parked-${k}.gz`), c));
    const own = writers.map(() => [] as Uint8Array[]);
    slices.forEach((s, i) => own[i % writers.length]!.push(s));
    for (let i = 0; i < 80; i++) {
      for (let k = 0; k < writers.length; k++) {
        const writing = writers[k]!.write(own[k]![i]!);
        if (writing) await writing;
      }
    }
    expect(c.parkedBytes).toBeGreaterThan(64 * KiB);
    expect(readdirSync(parkDir)).toHaveLength(1);
    await writers[0]!.close();
    await writers[1]!.close();
    // Still in use by the third part.
    expect(readdirSync(parkDir)).toHaveLength(1);
    await writers[2]!.close();
    expect(readdirSync(parkDir)).toHaveLength(0);
    writers.forEach((w, k) => {
      const mine = Buffer.concat(own[k]!.slice(0, 80).map((s) => Buffer.from(s)));
      expect(readFileSync(w.path!).equals(membersOf(mine, 64 * KiB, 6)), `part ${k}`).toBe(true);
    });
    // Keeping a whole member (or more) parks nothing.
    expect(new MemberCompressor(6, 64 * KiB, 2, { dir: parkDir, keepBytes: MiB }).keepBytes).toBe(64 * KiB);
  });

  it('a failure while writing a member is reported by the next call, and by end()', async () => {
    const c = new MemberCompressor(6, 64 * KiB, 2);
    let written = 0;
    const failing = new GzipMembers(c, () => {
      if (++written === 2) throw new Error('disk gone');
    });
    const data = whole.subarray(0, 400 * KiB);
    await expect(
      (async () => {
        for (let at = 0; at < data.length; at += 10 * KiB) {
          const taking = failing.write(data.subarray(at, at + 10 * KiB));
          if (taking) await taking;
          // Let zlib's callbacks run, as the dealing gives them time between buckets.
          await new Promise((r) => setTimeout(r, 2));
        }
        await failing.end();
      })(),
    ).rejects.toThrow('disk gone');
    expect(() => failing.write(data.subarray(0, 10))).toThrow('disk gone');
    // The places in flight came back.
    await new Promise((r) => setTimeout(r, 50));
    expect(c.inFlight).toBe(0);
  });
});

describe('shuffle --gzip', () => {
  let input: string;
  let plainOut: string;
  let plain: Manifest;
  beforeAll(async () => {
    input = join(dir, 'readings.csv');
    // ~7 MB: each of 2 parts spans several 1 MiB members.
    writeFileSync(input, makeSensorCsv({ rows: 170000, seed: 61, sensors: 500 }));
    plainOut = join(dir, 'plain');
    plain = await shuffle({ inputs: [input], out: plainOut, seed: 'gz', partitions: 2, stratify: 'fault', folds: 3, threads: 2 });
  });

  const base = (): ShuffleOptions => ({ inputs: [input], out: '', seed: 'gz', partitions: 2, stratify: 'fault', folds: 3, gzip: true });

  it('the same bytes for threads 0, 1, 2 and memory 8MiB, 1GiB; they inflate to the plain parts', async () => {
    expect(plain.output.parts[0]!.bytes).toBeGreaterThan(2 * MiB);
    const runs: { name: string; m: Manifest; out: string }[] = [];
    for (const threads of [0, 1, 2]) {
      for (const memory of ['8MiB', '1GiB']) {
        const out = join(dir, `t${threads}-${memory}`);
        runs.push({ name: `threads ${threads}, memory ${memory}`, m: await shuffle({ ...base(), out, threads, memory }), out });
      }
    }
    const ref = runs[0]!;
    // The bucket counts differ (the memory decides them), the bytes do not.
    expect(new Set(runs.map((r) => r.m.run.buckets)).size).toBeGreaterThan(1);
    for (const r of runs) {
      expect(manifestBody(r.out), r.name).toEqual(manifestBody(ref.out));
      for (const p of r.m.output.parts) expect(readFileSync(join(r.out, p.path)).equals(readFileSync(join(ref.out, p.path))), `${r.name}: ${p.path}`).toBe(true);
    }
    expect(ref.m.options.gzipLevel).toBe(6);
    for (const [k, p] of ref.m.output.parts.entries()) {
      const file = readFileSync(join(ref.out, p.path));
      const plainPart = readFileSync(join(plainOut, plain.output.parts[k]!.path));
      expect(gunzipSync(file).equals(plainPart)).toBe(true);
      if (systemGzip) expect(systemGunzip(file).equals(plainPart)).toBe(true);
      // The layout of docs/manifest.md: members of 1 MiB of the plain part (2 parts).
      expect(file.equals(membersOf(plainPart, memberBytesFor(2), 6))).toBe(true);
    }
    const v = await verify({ dir: ref.out, against: [input] });
    expect(v.ok).toBe(true);
    expect(v.replay?.status).toBe('passed');
  });

  it('many parts: members of the smaller size, still the same bytes whatever the threads', async () => {
    const { folds: _folds, ...rest } = base();
    const o = { ...rest, partitions: 40 };
    const a = await shuffle({ ...o, out: join(dir, 'many-a'), threads: 0, memory: '4MiB' });
    const b = await shuffle({ ...o, out: join(dir, 'many-b'), threads: 2 });
    const c = await shuffle({ ...o, out: join(dir, 'many-plain'), gzip: false, threads: 2 });
    expect(memberBytesFor(40)).toBe(256 * KiB);
    for (const [k, p] of a.output.parts.entries()) {
      const file = readFileSync(join(dir, 'many-a', p.path));
      expect(file.equals(readFileSync(join(dir, 'many-b', b.output.parts[k]!.path))), p.path).toBe(true);
      expect(file.equals(membersOf(readFileSync(join(dir, 'many-plain', c.output.parts[k]!.path)), 256 * KiB, 6)), p.path).toBe(true);
    }
  });

  it('many parts in a small budget park their unfinished members: the bytes of a budget that holds them', async () => {
    const { folds: _folds, ...rest } = base();
    const o = { ...rest, partitions: 200 };
    const M = memberBytesFor(200);
    expect(M).toBe(64 * KiB);
    // At 4 MiB each part keeps 8 KiB of its member in memory and parks the rest; at 1 GiB, all of it.
    expect(keepBytesFor(4 * MiB, 200, M)).toBe(8 * KiB);
    expect(keepBytesFor(GiB, 200, M)).toBe(M);
    const small = await shuffle({ ...o, out: join(dir, 'parked-small'), memory: '4MiB', threads: 2 });
    const large = await shuffle({ ...o, out: join(dir, 'parked-large'), memory: '1GiB', threads: 1 });
    const plainMany = await shuffle({ ...o, out: join(dir, 'parked-plain'), gzip: false, threads: 2 });
    for (const [k, p] of small.output.parts.entries()) {
      const file = readFileSync(join(dir, 'parked-small', p.path));
      expect(file.equals(readFileSync(join(dir, 'parked-large', large.output.parts[k]!.path))), p.path).toBe(true);
      expect(file.equals(membersOf(readFileSync(join(dir, 'parked-plain', plainMany.output.parts[k]!.path)), M, 6)), p.path).toBe(true);
    }
  });

  it('each level is recorded and gives its own bytes of the same parts; a plain manifest has no level', async () => {
    const got: Record<number, Manifest> = {};
    for (const level of [1, 9]) got[level] = await shuffle({ ...base(), out: join(dir, `level-${level}`), gzipLevel: level });
    expect(got[1]!.options.gzipLevel).toBe(1);
    expect(got[9]!.options.gzipLevel).toBe(9);
    expect(plain.options).not.toHaveProperty('gzipLevel');
    for (const [k, p] of plain.output.parts.entries()) {
      const plainPart = readFileSync(join(plainOut, p.path));
      for (const level of [1, 9]) {
        const file = readFileSync(join(dir, `level-${level}`, got[level]!.output.parts[k]!.path));
        expect(file.equals(membersOf(plainPart, MiB, level)), `level ${level}`).toBe(true);
      }
    }
    const total = (m: Manifest): number => m.output.parts.reduce((a, p) => a + p.bytes, 0);
    expect(total(got[1]!)).toBeGreaterThan(total(got[9]!));
    expect((await verify({ dir: join(dir, 'level-9'), against: [input] })).replay?.status).toBe('passed');
  });

  it('a plan run as tasks gives the bytes of shuffle', async () => {
    const o = { ...base(), gzipLevel: 9 };
    const ref = join(dir, 'ref-plan');
    await shuffle({ ...o, out: ref });
    const out = join(dir, 'planned');
    const work = join(dir, 'work');
    const { out: _o, ...planned } = o;
    await planCluster({ ...planned, threads: 0, tasks: 3, gatherTasks: 2, out, work });
    const plan = loadPlan(work);
    for (let i = plan.scatter.length - 1; i >= 0; i--) await runScatterTask(plan, i);
    await runDealTask(plan);
    for (let i = plan.gather.length - 1; i >= 0; i--) await runGatherTask(plan, i);
    await finishCluster(plan);
    const files = readdirSync(ref).filter((f) => f.endsWith('.gz'));
    expect(files.length).toBe(2);
    for (const f of files) {
      expect(statSync(join(ref, f)).size).toBeGreaterThan(1000);
      expect(readFileSync(join(out, f)).equals(readFileSync(join(ref, f))), f).toBe(true);
    }
    expect(manifestBody(out)).toEqual(manifestBody(ref));
  });

  it('a manifest of parts written as one gzip stream each (no level recorded) is not replayed, and says why', () => {
    const m = JSON.parse(readFileSync(join(dir, 't0-8MiB', 'manifest.json'), 'utf8')) as Manifest;
    expect(replayable(m)).toEqual({ ok: true });
    const older = structuredClone(m);
    delete (older.options as Record<string, unknown>).gzipLevel;
    const r = replayable(older);
    expect(r.ok).toBe(false);
    expect(r.ok ? '' : r.why).toContain('one gzip stream each');
  });
});

describe('the option', () => {
  const o = (more: Partial<ShuffleOptions>): ShuffleOptions => ({ inputs: [join(dir, 'none.csv')], out: join(dir, 'never'), ...more });

  it('takes 1 to 9, only with gzip', async () => {
    for (const bad of [0, 10, 2.5, '6x', -1]) {
      await expect(shuffle(o({ gzip: true, gzipLevel: bad as number }))).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('"gzipLevel"') });
    }
    await expect(shuffle(o({ gzipLevel: 9 }))).rejects.toMatchObject({ code: 'RDK_OPTION', message: expect.stringContaining('together with "gzip"') });
  });

  it('on the command line: --gzip-level N, a usage error without --gzip or out of range, and in --help', async () => {
    const input = join(dir, 'cli.csv');
    writeFileSync(input, makeSensorCsv({ rows: 3000, seed: 62 }));
    const ok = await rowdeck(['shuffle', input, '--out', join(dir, 'cli-out'), '--gzip', '--gzip-level', '3', '--quiet']);
    expect(ok.status, ok.stderr).toBe(0);
    const m = JSON.parse(readFileSync(join(dir, 'cli-out', 'manifest.json'), 'utf8')) as Manifest;
    expect(m.options.gzipLevel).toBe(3);
    const file = readFileSync(join(dir, 'cli-out', 'part-00000.csv.gz'));
    expect(file.equals(membersOf(gunzipSync(file), MiB, 3))).toBe(true);
    expect(file.equals(membersOf(gunzipSync(file), MiB, 6))).toBe(false);
    for (const args of [['--gzip-level', '3'], ['--gzip', '--gzip-level', '0'], ['--gzip', '--gzip-level', 'fast']]) {
      const r = await rowdeck(['shuffle', input, '--out', join(dir, 'cli-bad'), ...args]);
      expect(r.status, args.join(' ')).toBe(2);
      expect(r.stderr).toContain('gzip');
    }
    const help = await rowdeck(['shuffle', '--help']);
    expect(help.stdout).toMatch(/--gzip-level N\s+with --gzip: 1 \(fastest\) to 9 \(smallest\); default 6/);
  });
});
