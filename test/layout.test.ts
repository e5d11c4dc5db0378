/**
 * The layout a run takes (src/engine/sizing.ts): which one the input's size over the budget
 * gives, that every layout writes the same bytes in every mode, and the default budget. Speed
 * and memory goals are in bench/ (docs/benchmarks.md, "Scale"); the peak memory test is in
 * test/shuffle.process.test.ts.
 */
import { createHash } from 'node:crypto';
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle, type Manifest, type ShuffleOptions } from '../src/index.js';
import { BUCKET_TARGET, bucketTarget, bufferShare, bucketCap, chooseBuckets, MEMORY_LAYOUT_SHARE, MIN_WRITE, sizeRun, youngGenerationMb } from '../src/engine/sizing.js';
import { cgroupRoom, defaultMemoryFor, DEFAULT_MEMORY_MAX, DEFAULT_MEMORY_MIN, memAvailableOf } from '../src/io/memory-available.js';
import { resolveShuffleOptions } from '../src/options.js';
import { run as runShuffleCli } from '../src/cli/commands/shuffle.js';
import { spaceNeed } from '../src/engine/shuffle.js';
import { setFlag } from '../src/flags.js';
import { listFiles, makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

const MiB = 1024 * 1024;
const GiB = 1024 * MiB;
let dir: string;
let input: string;

beforeAll(() => {
  dir = makeTempDir('rowdeck-layout-');
  input = join(dir, 'readings.csv');
  // ~1.6 MB: large enough that a forced multi-pass run splits several buckets.
  writeFileSync(input, makeSensorCsv({ rows: 30_000, seed: 21, sensors: 400 }));
});
afterAll(() => removeDir(dir));

describe('the rule: input over budget', () => {
  const inFlight = (threads: number): number => 2 * threads + 2;

  it('a spill within 3/4 of the budget stays in memory; never in a plan (allowMemory false)', () => {
    for (const memory of [64 * MiB, 512 * MiB, 8 * GiB]) {
      const fits = Math.floor(MEMORY_LAYOUT_SHARE * memory);
      expect(chooseBuckets(fits, memory, 2, inFlight(2), true).layout).toBe('memory');
      expect(chooseBuckets(fits + 1, memory, 2, inFlight(2), true).layout).not.toBe('memory');
      expect(chooseBuckets(fits, memory, 2, inFlight(2), false).layout).toBe('spill');
    }
  });

  it('larger: one level of buckets while it holds the spill, with buffers of at least 32 KiB a task; then multi-pass', () => {
    for (const threads of [1, 2, 8]) {
      for (const memory of [16 * MiB, 64 * MiB, 512 * MiB, 4 * GiB]) {
        const tasks = threads;
        const cap = bucketCap(memory, inFlight(threads));
        // The most buckets whose buffers of MIN_WRITE a task fit stage 1's share.
        const most = 2 ** Math.floor(Math.log2(bufferShare(memory) / (MIN_WRITE * tasks)));
        const holds = most * cap;
        const medium = chooseBuckets(holds, memory, threads, inFlight(threads), true);
        const large = chooseBuckets(holds * 4, memory, threads, inFlight(threads), true);
        expect(medium.layout, `${memory} ${threads}`).toBe(holds <= MEMORY_LAYOUT_SHARE * memory ? 'memory' : 'spill');
        expect(large.layout).toBe('multi-pass');
        for (const c of [medium, large]) {
          // Every bucket of one level fits what stage 2 takes whole, or the layout splits it.
          if (c.layout !== 'multi-pass') expect(holds / 2 ** c.bits).toBeLessThanOrEqual(cap);
          // Buffers: at least MIN_WRITE a task, all of them within stage 1's share.
          expect(c.bufferBytes / tasks).toBeGreaterThanOrEqual(MIN_WRITE);
          expect(2 ** c.bits * c.bufferBytes).toBeLessThanOrEqual(bufferShare(memory));
        }
        // The multi-pass layout takes as many buckets as the buffers allow, whatever the size.
        expect(2 ** large.bits).toBe(Math.min(most, 2 ** 14));
        expect(chooseBuckets(holds * 64, memory, threads, inFlight(threads), true).bits).toBe(large.bits);
      }
    }
  });

  it('bucket size: 3 MiB where stage 2 takes twice that whole, else 1.5 MiB or what it takes whole', () => {
    // Two threads: 6 buckets in flight, stage 2 takes a bucket of budget / 21 whole.
    expect(bucketTarget(512 * MiB, 6)).toBe(BUCKET_TARGET);
    expect(bucketTarget(126 * MiB, 6)).toBe(BUCKET_TARGET);
    expect(bucketTarget(125 * MiB, 6)).toBe(BUCKET_TARGET / 2);
    expect(bucketTarget(64 * MiB, 6)).toBe(BUCKET_TARGET / 2);
    expect(bucketTarget(4 * MiB, 6)).toBe(bucketCap(4 * MiB, 6));
  });

  it('the benchmark figures: 1 GB at 64 MiB and at 8x is multi-pass with 256 buckets; at 2 GiB, 1 GB stays in memory', () => {
    const spill1x = 998e6 * 1.3;
    expect(chooseBuckets(spill1x, 64 * MiB, 2, 6, true)).toMatchObject({ layout: 'multi-pass', bits: 8 });
    expect(chooseBuckets(8 * spill1x, 64 * MiB, 2, 6, true)).toMatchObject({ layout: 'multi-pass', bits: 8 });
    expect(chooseBuckets(spill1x, 2 * GiB, 2, 6, true).layout).toBe('memory');
    // 512 MiB: one level of 512 buckets of ~2.5 MB at 1x; at 8x 2,048 larger ones (stage 1's buffers stop at 128 MiB).
    expect(chooseBuckets(spill1x, 512 * MiB, 2, 6, true)).toMatchObject({ layout: 'spill', bits: 9 });
    expect(chooseBuckets(8 * spill1x, 512 * MiB, 2, 6, true)).toMatchObject({ layout: 'spill', bits: 11 });
  });

  it('sizeRun: the memory layout gets the budget left after buffers and buckets in flight; the others none', () => {
    const small = sizeRun({ inputs: [input], memory: 256 * MiB, threads: 2 }, true);
    expect(small.layout).toBe('memory');
    expect(small.storeBytes).toBeGreaterThan(small.spillEstimate);
    expect(small.storeBytes + small.buckets * small.bufferBytes).toBeLessThanOrEqual(256 * MiB);
    expect(sizeRun({ inputs: [input], memory: 256 * MiB, threads: 2 }, false)).toMatchObject({ layout: 'spill', storeBytes: 0 });
    expect(sizeRun({ inputs: [input], memory: 1 * MiB, threads: 2 }, true)).toMatchObject({ layout: 'multi-pass', storeBytes: 0 });
  });

  it('sizeRun: the spill layout of one process keeps what the budget leaves in memory; a plan\'s tasks and a forced spill keep none', () => {
    // ~5.6 MB of input, a spill of ~7 MB: over 3/4 of 8 MiB, one level of buckets on one thread.
    const larger = join(dir, 'larger-sizing.csv');
    writeFileSync(larger, makeSensorCsv({ rows: 100_000, seed: 8 }));
    const memory = 8 * MiB;
    const one = sizeRun({ inputs: [larger], memory, threads: 1 }, true);
    expect(one.layout).toBe('spill');
    expect(one.storeBytes).toBe(Math.floor(memory - one.buckets * one.bufferBytes - 3 * one.inFlight * one.bucketTarget));
    expect(one.storeBytes).toBeGreaterThan(0);
    expect(one.storeBytes).toBeLessThan(one.spillEstimate);
    expect(sizeRun({ inputs: [larger], memory, threads: 1 }, false)).toMatchObject({ layout: 'spill', storeBytes: 0 });
    // The disk check asks room for the rest only.
    const o = resolveShuffleOptions({ inputs: [larger], out: join(dir, 'x'), memory: '8MiB', threads: 1 });
    expect(spaceNeed(o, one, dir, null).spillBytes).toBeCloseTo(one.spillEstimate - one.storeBytes, 0);
    const restore = setFlag('ROWDECK_LAYOUT', 'spill');
    try {
      expect(sizeRun({ inputs: [larger], memory, threads: 1 }, true)).toMatchObject({ layout: 'spill', storeBytes: 0 });
    } finally {
      restore();
    }
  });
});

/** Every part's sha256 and the manifest without its run section. */
function outputOf(out: string, m: Manifest): { files: Record<string, string>; manifest: string } {
  const files: Record<string, string> = {};
  for (const f of listFiles(out)) if (f !== 'manifest.json') files[f] = createHash('sha256').update(readFileSync(join(out, f))).digest('hex');
  const { run: _run, ...rest } = JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')) as Manifest;
  expect(m.output.parts.length).toBeGreaterThan(0);
  return { files, manifest: JSON.stringify(rest) };
}

describe('the worker threads\' young generation', () => {
  it('is capped under a small budget (an eighth of it, 6 to 32 MiB), left to V8 from 512 MiB', () => {
    const MiB = 1024 * 1024;
    expect(youngGenerationMb(4 * MiB)).toBe(6);
    expect(youngGenerationMb(64 * MiB)).toBe(8);
    expect(youngGenerationMb(256 * MiB)).toBe(32);
    expect(youngGenerationMb(511 * MiB)).toBe(32);
    expect(youngGenerationMb(512 * MiB)).toBeUndefined();
  });
});

describe('every layout writes the same bytes', () => {
  const modes: [string, Partial<ShuffleOptions>][] = [
    ['folds', { partitions: 3, stratify: 'fault', folds: 4 }],
    ['groups', { partitions: 3, stratify: 'fault', group: 'sensor' }],
    ['groups, grouped order', { partitions: 2, group: 'sensor', order: 'grouped' }],
    ['hash', { partitions: 4, assign: 'hash', key: 'id', folds: 2 }],
    ['spread', { partitions: 3, stratify: 'fault', order: 'spread' }],
    ['stats', { split: 'train=0.8,test=0.2', stratify: 'site', stats: true }],
    ['gzip', { partitions: 2, stratify: 'fault', gzip: true }],
  ];
  // Each layout forced (ROWDECK_LAYOUT), the memory layout in both of its stores; threads 2 and 0.
  // 'spill, partly in memory': the first 1.2 MB of a ~2.1 MB spill kept in memory, the rest in
  // files; in shared memory 2.2 MB, two slabs of 1 MiB for 32 pairs of task and range.
  const variants: { name: string; layout: string; store?: string; storeBytes?: string; threads: number; ran: string }[] = [
    { name: 'memory (files in /dev/shm where there are)', layout: 'memory', threads: 2, ran: 'memory' },
    { name: 'memory (shared memory)', layout: 'memory', store: 'shared', threads: 2, ran: 'memory' },
    { name: 'spill', layout: 'spill', threads: 2, ran: 'spill' },
    { name: 'spill, partly in memory (files in /dev/shm)', layout: 'spill', storeBytes: '1200000', threads: 2, ran: 'spill' },
    { name: 'spill, partly in memory (shared memory)', layout: 'spill', store: 'shared', storeBytes: '2200000', threads: 2, ran: 'spill' },
    { name: 'multi-pass', layout: 'multi-pass', threads: 2, ran: 'multi-pass' },
    { name: 'multi-pass on the calling thread', layout: 'multi-pass', threads: 0, ran: 'multi-pass' },
  ];

  it.each(modes)('%s', async (name, opts) => {
    const seen: { variant: string; out: ReturnType<typeof outputOf> }[] = [];
    for (const v of variants) {
      const restore = [setFlag('ROWDECK_LAYOUT', v.layout), setFlag('ROWDECK_MEMORY_STORE', v.store), setFlag('ROWDECK_STORE_BYTES', v.storeBytes)];
      try {
        const out = join(dir, `${name.replace(/\W+/g, '-')}-${seen.length}`);
        const m = await shuffle({ inputs: [input], out, seed: 'layouts', threads: v.threads, memory: '64MiB', ...opts });
        expect(m.run.layout, v.name).toBe(v.ran);
        // Where the spill lay: all in memory, all in files, or split where the store ran out.
        const { memory: inMemory, files: inFiles } = m.run.spillBytes!;
        if (v.ran === 'memory') expect(inFiles, v.name).toBe(0);
        // Shared memory is taken a slab at a time, and --group's census spill may take the one
        // slab the allowance holds: only the files in /dev/shm are sure to hold part of it.
        else if (v.storeBytes) expect([inMemory > 0 || v.store === 'shared', inFiles > 0, inMemory <= Number(v.storeBytes)], v.name).toEqual([true, true, true]);
        else expect(inMemory, v.name).toBe(0);
        if (v.ran === 'multi-pass') expect(m.run.bucketsSplit, v.name).toBeGreaterThan(1);
        else expect(m.run.bucketsSplit).toBe(0);
        seen.push({ variant: v.name, out: outputOf(out, m) });
      } finally {
        for (const r of restore.reverse()) r();
      }
    }
    for (const s of seen.slice(1)) {
      expect(s.out.files, `${s.variant} against ${seen[0]!.variant}`).toEqual(seen[0]!.out.files);
      expect(s.out.manifest, s.variant).toBe(seen[0]!.out.manifest);
    }
  });

  it('the rule itself at three budgets: memory, spill and multi-pass, the same bytes', async () => {
    // ~5.6 MB, a spill of ~7.3 MB: within 3/4 of 64 MiB; over 3/4 of 8 MiB, where one thread's
    // 64 buffers of 32 KiB hold buckets of up to 8 MiB / 15 (~35 MB in all); not at 1 MiB.
    const larger = join(dir, 'larger.csv');
    writeFileSync(larger, makeSensorCsv({ rows: 100_000, seed: 8 }));
    const ran: string[] = [];
    const outs: ReturnType<typeof outputOf>[] = [];
    for (const memory of ['64MiB', '8MiB', '1MiB']) {
      const out = join(dir, `rule-${memory}`);
      const m = await shuffle({ inputs: [larger], out, seed: 'rule', threads: 1, memory, partitions: 4, stratify: 'fault', folds: 3 });
      ran.push(m.run.layout);
      // 8 MiB: the spill layout keeps what the budget leaves (~0.6 MB) in memory, the rest in files.
      if (m.run.layout === 'spill') expect(m.run.spillBytes!.memory > 0 && m.run.spillBytes!.files > 0, JSON.stringify(m.run.spillBytes)).toBe(true);
      expect(m.run.memory).toBe(Number.parseInt(memory, 10) * MiB);
      expect(m.run.memoryIsDefault).toBe(false);
      outs.push(outputOf(out, m));
    }
    expect(ran, JSON.stringify(ran)).toEqual(['memory', 'spill', 'multi-pass']);
    expect(outs[1]).toEqual(outs[0]);
    expect(outs[2]).toEqual(outs[0]);
  });

  it('quantile bins: the edges do not depend on the budget (the sample has a fixed size)', async () => {
    // 50,000 values: more than a 1 MiB budget's sample held before its size was fixed.
    const many = join(dir, 'many.csv');
    writeFileSync(many, makeSensorCsv({ rows: 50_000, seed: 4 }));
    const edges: unknown[] = [];
    for (const memory of ['1MiB', '1GiB']) {
      const m = await shuffle({ inputs: [many], out: join(dir, `bins-${memory}`), seed: 'bins', memory, partitions: 3, stratify: 'reading:bins=7' });
      edges.push(m.strata);
      expect(m.run.memory).toBe(memory === '1MiB' ? MiB : GiB);
    }
    expect(edges[1]).toEqual(edges[0]);
  });
});

describe('the default budget', () => {
  it('a quarter of the memory available, in whole MiB, from 128 MiB to 16 GiB', () => {
    expect(defaultMemoryFor(8 * GiB)).toBe(2 * GiB);
    expect(defaultMemoryFor(8 * GiB + 3 * MiB)).toBe(2 * GiB);
    expect(defaultMemoryFor(6 * GiB + 5)).toBe(1536 * MiB);
    expect(defaultMemoryFor(100 * MiB)).toBe(DEFAULT_MEMORY_MIN);
    expect(defaultMemoryFor(0)).toBe(DEFAULT_MEMORY_MIN);
    expect(defaultMemoryFor(1024 * GiB)).toBe(DEFAULT_MEMORY_MAX);
    expect([DEFAULT_MEMORY_MIN, DEFAULT_MEMORY_MAX]).toEqual([128 * MiB, 16 * GiB]);
  });

  it('MemAvailable from /proc/meminfo; the room under a memory control group limit (v1 and v2)', () => {
    // The layout of proc(5)'s /proc/meminfo lines.
    expect(memAvailableOf('MemTotal:       24683748 kB\nMemFree:        13819060 kB\nMemAvailable:   23163724 kB\n')).toBe(23163724 * 1024);
    expect(memAvailableOf('MemTotal: 1 kB\n')).toBeNull();
    const files = (m: Record<string, string>) => (p: string): string | null => m[p] ?? null;
    // cgroup v2: "0::/path", memory.max and memory.current (Linux's cgroup-v2.rst).
    expect(cgroupRoom(files({ '/proc/self/cgroup': '0::/jobs/a\n', '/sys/fs/cgroup/jobs/a/memory.max': '1073741824\n', '/sys/fs/cgroup/jobs/a/memory.current': '73741824\n' }))).toBe(1e9);
    expect(cgroupRoom(files({ '/proc/self/cgroup': '0::/\n', '/sys/fs/cgroup/memory.max': 'max\n' }))).toBeNull();
    // cgroup v1: the memory controller's line; no limit reads as a number near 2^63.
    expect(cgroupRoom(files({ '/proc/self/cgroup': '4:memory:/box\n1:cpu:/\n', '/sys/fs/cgroup/memory/box/memory.limit_in_bytes': '536870912', '/sys/fs/cgroup/memory/box/memory.usage_in_bytes': '36870912' }))).toBe(5e8);
    expect(cgroupRoom(files({ '/proc/self/cgroup': '4:memory:/\n', '/sys/fs/cgroup/memory/memory.limit_in_bytes': '9223372036854771712' }))).toBeNull();
    expect(cgroupRoom(files({}))).toBeNull();
  });

  it('without --memory a run takes it, says so in the manifest, and --help prints it; --memory wins', async () => {
    const o = resolveShuffleOptions({ inputs: [input], out: join(dir, 'x') });
    expect(o.memoryIsDefault).toBe(true);
    expect(o.memory).toBeGreaterThanOrEqual(DEFAULT_MEMORY_MIN);
    expect(o.memory).toBeLessThanOrEqual(DEFAULT_MEMORY_MAX);
    expect(o.memory % MiB).toBe(0);
    expect(resolveShuffleOptions({ inputs: [input], out: join(dir, 'x'), memory: '96MiB' })).toMatchObject({ memory: 96 * MiB, memoryIsDefault: false });
    const m = await shuffle({ inputs: [input], out: join(dir, 'default-budget'), partitions: 2 });
    expect(m.run.memoryIsDefault).toBe(true);
    expect(m.run.memory).toBeGreaterThanOrEqual(DEFAULT_MEMORY_MIN);
    expect(m.run.memory).toBeLessThanOrEqual(DEFAULT_MEMORY_MAX);
    let help = '';
    const io = { stdout: { write: (t: string) => ((help += t), true) }, stderr: { write: () => true } };
    expect(await runShuffleCli(['--help'], io as never)).toBe(0);
    const shown = /default: a quarter of the memory\s+available at start, 128MiB to 16GiB; here now: (\d+)(MiB|GiB)\)/.exec(help);
    expect(shown, help).not.toBeNull();
    const bytes = Number(shown![1]) * (shown![2] === 'GiB' ? GiB : MiB);
    expect(bytes).toBeGreaterThanOrEqual(DEFAULT_MEMORY_MIN);
    expect(bytes).toBeLessThanOrEqual(DEFAULT_MEMORY_MAX);
    expect(help).toMatch(/Memory and disk:[\s\S]*memory {6}[\s\S]*spill {7}[\s\S]*multi-pass {2}/);
  });
});
