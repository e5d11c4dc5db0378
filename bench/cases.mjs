// The benchmark's catalogue: its inputs, its cases in named groups, and the figures (ratios and
// goals) computed from one run. To add a case, add an entry to cases() with the groups it belongs
// to; `npm run bench -- --group NAME` or `--only NAME` picks it.
//
// A case is { name, groups, input, rowdeck | cmd, budget?, needs?, requires? }:
// - input: a key of inputs() (the file is made on first use);
// - rowdeck: (io) => the arguments after `node dist/cli/main.cjs`. Such cases run with every build
//   (`--compare`); the harness reads their manifest (io.out/manifest.json) for the bucket count;
// - cmd: (io) => a full argv, for tools other than rowdeck;
//   io is { input, out }: out is a scratch path, removed after each run;
// - budget: the `--memory` given, in bytes ('default': the build's own), for the peak RSS goal;
// - needs: { disk, memory } as functions of the input's size in bytes: the case is skipped with a
//   line when the scratch folder's file system or MemAvailable has less;
// - requires: a tool name of tools (see run.mjs), or a list of them, the case cannot run without.
//
// A figure is { group, text, of, max?, atLeast?, wall? }: `of(f)` computes it from the summaries
// (f(name) is a case's summary for this checkout's build, or null). Wall time ratios are computed
// twice (wall: true), from the medians and from the minimums (`of(f, 'min')`); goals are judged
// on the medians.

import { availableParallelism } from 'node:os';

export const MiB = 2 ** 20;
export const GiB = 2 ** 30;

/** Groups whose figures go to docs/benchmarks.md (between their markers) and latest.json. */
export const reportGroups = {
  core: { marker: 'shuffle-bench', heading: 'Shuffle' },
  scale: { marker: 'scale-bench', heading: 'Scale: 1×, 4× and 8× the 1 GB file' },
  cluster: { marker: 'cluster-bench', heading: 'A plan run as local processes' },
  gzip: { marker: 'gzip-bench', heading: 'gzip in and out' },
};

/** The gzip levels of the gzip group: its cases run at each. */
export const GZIP_LEVELS = [1, 6, 9];

export const SCALES = [1, 4, 8];

export function inputs(quick) {
  const big = quick
    ? { file: 'readings-100m.csv', generate: ['generate.mjs', '--bytes', '1e8', '--seed', '3'] }
    : { file: 'readings-1g.csv', generate: ['generate.mjs', '--bytes', '1e9', '--seed', '1'] };
  const copies = Object.fromEntries(
    SCALES.filter((m) => m > 1).map((m) => [`big-x${m}`, { file: big.file.replace(/\.csv$/, `-x${m}.csv`), copiesOf: 'big', times: m }]),
  );
  return {
    big,
    small: quick
      ? { file: 'readings-20m.csv', generate: ['generate.mjs', '--bytes', '2e7', '--seed', '4'] }
      : { file: 'readings-200m.csv', generate: ['generate.mjs', '--bytes', '2e8', '--seed', '2'] },
    // 2,002 columns (bench/generate-wide.mjs): the column statistics' cost per column.
    wide: quick
      ? { file: 'rig-wide-1k.csv', generate: ['generate-wide.mjs', '--rows', '1000', '--channels', '2000', '--seed', '1'] }
      : { file: 'rig-wide.csv', generate: ['generate-wide.mjs', '--rows', '5000', '--channels', '2000', '--seed', '1'] },
    ...copies,
    // The small file gzip-compressed (made once, by node:zlib at gzip's default level).
    smallGz: quick ? { file: 'readings-20m.csv.gz', gzipOf: 'small', level: 6 } : { file: 'readings-200m.csv.gz', gzipOf: 'small', level: 6 },
  };
}

// What a stratified shuffle needs on disk: its spill (~1.3× the input, the records with a 24-byte
// header each) and its parts (1×), plus room for the file system.
const shuffleDisk = (b) => 2.4 * b + GiB / 4;
const copyDisk = (b) => 1.05 * b + GiB / 4;
// GNU shuf holds the whole input and a pointer a line (1,130 MiB peak for the 998 MB file).
const shufMemory = (b) => 1.3 * b + GiB / 2;

const strat = ['--partitions', '8', '--stratify', 'fault', '--seed', 'bench', '--force', '--quiet'];
const shuffle = (io, ...more) => ['shuffle', io.input, '--out', io.out, ...more, ...strat];

/** A budget that holds the whole input with room: twice its size, up to a power of two GiB. */
export function budgetHolding(bytes) {
  return 2 ** Math.max(0, Math.ceil(Math.log2((2 * bytes) / GiB))) * GiB;
}
const sizeText = (bytes) => (bytes >= GiB && bytes % GiB === 0 ? `${bytes / GiB}GiB` : `${Math.round(bytes / MiB)}MiB`);

export function cases({ inputBytes, root }) {
  const list = [
    { name: 'cat', groups: ['core', 'floor'], input: 'big', cmd: (io) => ['cat', io.input] },
    // cp may copy inside the kernel (copy_file_range, as coreutils 9 does here) without the bytes
    // reaching a program; dd moves them through its own memory, 1 MiB at a time, as a program that
    // looks at every record must.
    { name: 'cp', groups: ['core', 'floor'], input: 'big', cmd: (io) => ['cp', io.input, io.out], needs: { disk: copyDisk } },
    { name: 'dd', groups: ['core', 'floor'], input: 'big', requires: 'dd', cmd: (io) => ['dd', `if=${io.input}`, `of=${io.out}`, 'bs=1M', 'status=none'], needs: { disk: copyDisk } },
    { name: 'shuf', groups: ['core', 'peers'], input: 'big', requires: 'shuf', cmd: (io) => ['shuf', io.input, '-o', io.out], needs: { disk: copyDisk, memory: shufMemory } },
    { name: 'rowdeck-p8', groups: ['core', 'shuffle'], input: 'big', budget: 'default', rowdeck: (io) => ['shuffle', io.input, '--out', io.out, '--partitions', '8', '--seed', 'bench', '--force', '--quiet'], needs: { disk: shuffleDisk } },
    { name: 'rowdeck-strat', groups: ['core', 'shuffle', 'cluster'], input: 'big', budget: 'default', rowdeck: (io) => shuffle(io), needs: { disk: shuffleDisk } },
    // The same shuffle as a plan's tasks (4 scatter, 4 gather) run as local processes two at a
    // time, each on its calling thread (two processes fill the two cores; a worker thread each
    // measured 8% slower): what the cluster path costs over one machine's run.
    {
      name: 'rowdeck-cluster-4x4',
      groups: ['cluster'],
      input: 'big',
      cmd: (io) => [process.execPath, `${root}/bench/cluster-local.mjs`, io.input, io.out, '--tasks', '4', '--gather-tasks', '4', '--at-once', '2', '--threads', '0', '--cli', `${root}/dist/cli/main.cjs`, ...strat.filter((a) => a !== '--force')],
      // The spill (1.3x), the gather tasks' slices (1x) and the parts (1x) are on disk at once.
      needs: { disk: (b) => 3.5 * b + GiB / 4 },
    },
    { name: 'rowdeck-strat-stats', groups: ['core', 'shuffle'], input: 'big', budget: 'default', rowdeck: (io) => shuffle(io, '--stats'), needs: { disk: shuffleDisk } },
    { name: 'rowdeck-folds', groups: ['core', 'shuffle'], input: 'big', budget: 'default', rowdeck: (io) => shuffle(io, '--folds', '5'), needs: { disk: shuffleDisk } },
    // The 200 MB cases are set to the 1 GB runs' threads (one per core): they measure how time
    // and memory grow with the input, and on two cores a 200 MB input is by default shuffled on
    // the calling thread (src/io/input.ts, inlineMaxBytes).
    { name: 'rowdeck-strat-small', groups: ['core', 'shuffle'], input: 'small', budget: 'default', rowdeck: (io) => shuffle(io, '--threads', String(availableParallelism())), needs: { disk: shuffleDisk } },
    { name: 'rowdeck-mem64', groups: ['core', 'shuffle'], input: 'big', budget: 64 * MiB, rowdeck: (io) => shuffle(io, '--memory', '64MiB'), needs: { disk: shuffleDisk } },
    { name: 'rowdeck-mem64-small', groups: ['core', 'shuffle'], input: 'small', budget: 64 * MiB, rowdeck: (io) => shuffle(io, '--memory', '64MiB', '--threads', String(availableParallelism())), needs: { disk: shuffleDisk } },
    // Many parts with statistics: each part's tables are read back from its file rather than kept
    // by every lane, so the peak stays near the 8-part run's.
    {
      name: 'rowdeck-stats-256-mem64-small',
      groups: ['core', 'shuffle'],
      input: 'small',
      budget: 64 * MiB,
      rowdeck: (io) => ['shuffle', io.input, '--out', io.out, '--partitions', '256', '--stats', '--memory', '64MiB', '--seed', 'bench', '--force', '--quiet'],
      needs: { disk: shuffleDisk },
    },
    { name: 'rowdeck-profile', groups: ['core', 'profile'], input: 'big', rowdeck: (io) => ['profile', io.input, '--quiet'] },
    // 2,000 columns x 5,000 records (61 MB): memory and time that grow with the column count.
    { name: 'rowdeck-profile-wide', groups: ['core', 'wide', 'profile'], input: 'wide', rowdeck: (io) => ['profile', io.input, '--quiet'] },
    {
      name: 'rowdeck-stats-wide',
      groups: ['core', 'wide', 'shuffle'],
      input: 'wide',
      budget: 'default',
      rowdeck: (io) => ['shuffle', io.input, '--out', io.out, '--partitions', '8', '--stratify', 'rig_state', '--stats', '--seed', 'bench', '--force', '--quiet'],
      needs: { disk: shuffleDisk },
    },
    // A general-purpose SQL engine doing the same stratified deal (npm install --prefix bench).
    { name: 'sql-peer', groups: ['core', 'peers', 'sql'], input: 'big', requires: 'duckdb', cmd: (io) => [process.execPath, `${root}/bench/duckdb-deal.mjs`, io.input, io.out], needs: { disk: (b) => 3 * b, memory: (b) => 5 * b } },
    { name: 'sql-peer-1g-cap', groups: ['core', 'peers', 'sql'], input: 'big', requires: 'duckdb', cmd: (io) => [process.execPath, `${root}/bench/duckdb-deal.mjs`, io.input, io.out, '--memory-limit', '1GB'], needs: { disk: (b) => 3 * b, memory: () => 2 * GiB } },
  ];

  // gzip in and gzip out, at each level: rowdeck (the parts compressed on several cores) against
  // the usual pipeline at the same level, in the same rounds. The input is compressed (~3.1x here):
  // the disk and memory needs are of its uncompressed size.
  for (const level of GZIP_LEVELS) {
    list.push(
      {
        name: `rowdeck-gzip${level}-small`,
        groups: ['gzip'],
        input: 'smallGz',
        budget: 'default',
        // Level 6 without --gzip-level: gzip's default, and a build without the option can run it (--compare).
        rowdeck: (io) => shuffle(io, '--gzip', ...(level === 6 ? [] : ['--gzip-level', String(level)])),
        needs: { disk: (b) => shuffleDisk(4 * b) },
      },
      {
        name: `zcat-shuf-gzip${level}-small`,
        groups: ['gzip'],
        input: 'smallGz',
        requires: ['shuf', 'gzip'],
        cmd: (io) => ['sh', '-c', `zcat "$1" | shuf | gzip -${level} > "$2"`, 'sh', io.input, io.out],
        needs: { disk: copyDisk, memory: (b) => shufMemory(4 * b) },
      },
    );
  }

  // Scale: the 1 GB file at 1x, 4x and 8x; the stratified shuffle at the default budget, at
  // 64 MiB and at a budget that holds the whole input, and shuf, all in the same rounds.
  for (const m of SCALES) {
    const input = m === 1 ? 'big' : `big-x${m}`;
    const fit = budgetHolding(inputBytes(input));
    list.push(
      { name: `shuf-${m}x`, groups: ['scale'], input, requires: 'shuf', cmd: (io) => ['shuf', io.input, '-o', io.out], needs: { disk: copyDisk, memory: shufMemory } },
      { name: `rowdeck-${m}x`, groups: ['scale'], input, budget: 'default', rowdeck: (io) => shuffle(io), needs: { disk: shuffleDisk } },
      { name: `rowdeck-${m}x-mem64`, groups: ['scale'], input, budget: 64 * MiB, rowdeck: (io) => shuffle(io, '--memory', '64MiB'), needs: { disk: shuffleDisk } },
      {
        name: `rowdeck-${m}x-fit`,
        groups: ['scale'],
        input,
        budget: fit,
        rowdeck: (io) => shuffle(io, '--memory', sizeText(fit)),
        // A layout that holds the input in memory needs about the spill's size (1.3x).
        needs: { disk: shuffleDisk, memory: (b) => 1.5 * b + GiB / 2 },
      },
    );
  }
  return list;
}

const ratio = (a, b) => (a !== null && a !== undefined && b ? a / b : null);
const wall = (f, name, stat = 'median') => f(name)?.wallS[stat] ?? null;
const cpu = (f, name) => (f(name)?.userS != null && f(name)?.sysS != null ? f(name).userS + f(name).sysS : null);
const perGb = (f, name, stat) => {
  const s = f(name);
  return s && s.wallS[stat] !== null ? s.wallS[stat] / (s.inputBytes / 1e9) : null;
};

export function figures({ budgetOf }) {
  const list = [
    { group: 'cluster', text: 'rowdeck-cluster-4x4 / rowdeck-strat (wall; bytes moved: see the case\'s line)', wall: true, max: 1.3, of: (f, st) => ratio(wall(f, 'rowdeck-cluster-4x4', st), wall(f, 'rowdeck-strat', st)) },
    { group: 'core', text: 'rowdeck-strat / shuf (wall)', wall: true, max: 1, of: (f, st) => ratio(wall(f, 'rowdeck-strat', st), wall(f, 'shuf', st)) },
    { group: 'core', text: 'rowdeck-strat / (2 × cp)', wall: true, max: 4, of: (f, st) => ratio(wall(f, 'rowdeck-strat', st), wall(f, 'cp', st) && 2 * wall(f, 'cp', st)) },
    { group: 'core', text: 'rowdeck-strat / (2 × dd)', wall: true, of: (f, st) => ratio(wall(f, 'rowdeck-strat', st), wall(f, 'dd', st) && 2 * wall(f, 'dd', st)) },
    { group: 'core', text: 'rowdeck-strat big / small', wall: true, max: 5.5, of: (f, st) => ratio(wall(f, 'rowdeck-strat', st), wall(f, 'rowdeck-strat-small', st)) },
    { group: 'core', text: 'rowdeck-mem64 peak RSS (MiB)', max: 64 + 150, of: (f) => f('rowdeck-mem64')?.peakRssMiB ?? null },
    { group: 'core', text: 'rowdeck-mem64 peak RSS, big / small', max: 1.15, of: (f) => ratio(f('rowdeck-mem64')?.peakRssMiB, f('rowdeck-mem64-small')?.peakRssMiB) },
    { group: 'core', text: 'rowdeck-stats-256-mem64-small peak RSS (MiB)', of: (f) => f('rowdeck-stats-256-mem64-small')?.peakRssMiB ?? null },
    { group: 'core', text: 'rowdeck-profile-wide peak RSS (MiB)', of: (f) => f('rowdeck-profile-wide')?.peakRssMiB ?? null },
    { group: 'core', text: 'rowdeck-stats-wide peak RSS (MiB)', of: (f) => f('rowdeck-stats-wide')?.peakRssMiB ?? null },
    { group: 'core', text: 'rowdeck-profile (MB/s)', atLeast: 150, of: (f) => f('rowdeck-profile')?.mbPerS ?? null },
    { group: 'scale', text: 'rowdeck-1x-fit / shuf-1x (input inside the budget)', wall: true, max: 0.6, of: (f, st) => ratio(wall(f, 'rowdeck-1x-fit', st), wall(f, 'shuf-1x', st)) },
    { group: 'scale', text: 'rowdeck-1x / shuf-1x (default budget)', wall: true, max: 0.8, of: (f, st) => ratio(wall(f, 'rowdeck-1x', st), wall(f, 'shuf-1x', st)) },
  ];
  for (const level of GZIP_LEVELS) {
    const mine = `rowdeck-gzip${level}-small`;
    const peer = `zcat-shuf-gzip${level}-small`;
    // The goal is at gzip's default level; the others are shown.
    list.push(
      { group: 'gzip', text: `${mine} / ${peer} (wall)`, wall: true, ...(level === 6 ? { max: 0.5 } : {}), of: (f, st) => ratio(wall(f, mine, st), wall(f, peer, st)) },
      // What the wall ratio tends to when other work leaves no core idle: the CPU each spends.
      { group: 'gzip', text: `${mine} / ${peer} (CPU: user + sys)`, of: (f) => ratio(cpu(f, mine), cpu(f, peer)) },
      { group: 'gzip', text: `${mine}: parts (MB)`, of: (f) => (f(mine)?.outBytes ?? null) && f(mine).outBytes / 1e6 },
      { group: 'gzip', text: `${peer}: output (MB)`, of: (f) => (f(peer)?.outBytes ?? null) && f(peer).outBytes / 1e6 },
    );
  }
  for (const m of SCALES.filter((x) => x > 1)) {
    for (const v of ['', '-mem64', '-fit']) {
      list.push({ group: 'scale', text: `rowdeck-${m}x${v} / shuf-${m}x`, wall: true, of: (f, st) => ratio(wall(f, `rowdeck-${m}x${v}`, st), wall(f, `shuf-${m}x`, st)) });
    }
  }
  for (const v of ['', '-mem64', '-fit']) {
    for (const m of SCALES.filter((x) => x > 1)) {
      list.push({ group: 'scale', text: `time per GB, rowdeck-${m}x${v} / rowdeck-1x${v}`, wall: true, max: 1.15, of: (f, st) => ratio(perGb(f, `rowdeck-${m}x${v}`, st), perGb(f, `rowdeck-1x${v}`, st)) });
    }
  }
  for (const m of SCALES) {
    for (const v of ['', '-mem64', '-fit']) {
      const name = `rowdeck-${m}x${v}`;
      const budget = budgetOf(name);
      list.push({
        group: 'scale',
        text: `${name} peak RSS (MiB), within its budget${budget ? ` (${Math.round(budget / MiB)} MiB)` : ''} + 150 MiB`,
        ...(budget ? { max: Math.round(budget / MiB) + 150 } : {}),
        of: (f) => f(name)?.peakRssMiB ?? null,
      });
    }
  }
  return list;
}
