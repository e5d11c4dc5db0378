#!/usr/bin/env node
// rowdeck's benchmark: the job against what users would otherwise run, on the same files, one
// command after another. Prints a table, writes bench/results/latest.json and regenerates the
// "Shuffle" section of docs/benchmarks.md.
//
//   npm run bench                      # 1 GB, 200 MB and wide files (generated once into bench/data/)
//   npm run bench -- --quick           # 100 MB and 20 MB, for trying the harness
//   npm run bench -- --runs 5 --only rowdeck-strat,shuf
//
// Each case runs once as a warm-up, then --runs times (default 3); the median is reported.
// Peak RSS comes from GNU time (`/usr/bin/time -f %M`) when it is installed.
// The SQL peer needs `npm install --prefix bench` (bench/package.json); it is skipped otherwise.
import { execFileSync, spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { cpus, totalmem } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const args = process.argv.slice(2);
const flag = (name) => args.includes(`--${name}`);
const value = (name, dflt) => {
  const i = args.indexOf(`--${name}`);
  return i >= 0 ? args[i + 1] : dflt;
};
const quick = flag('quick');
const runs = Number(value('runs', 3));
const only = value('only', null)?.split(',');
const data = join(root, 'bench', 'data');
const tmp = join(data, 'tmp');
mkdirSync(tmp, { recursive: true });

const big = join(data, quick ? 'readings-100m.csv' : 'readings-1g.csv');
const small = join(data, quick ? 'readings-20m.csv' : 'readings-200m.csv');
for (const [file, bytes, seed] of [
  [big, quick ? 1e8 : 1e9, quick ? 3 : 1],
  [small, quick ? 2e7 : 2e8, quick ? 4 : 2],
]) {
  if (!existsSync(file)) {
    console.error(`generating ${file} …`);
    execFileSync(process.execPath, [join(root, 'bench', 'generate.mjs'), '--bytes', String(bytes), '--seed', String(seed), '--out', file], { stdio: 'inherit' });
  }
}
// Wide: 2,002 columns (bench/generate-wide.mjs), for the column statistics' cost per column.
const wide = join(data, quick ? 'rig-wide-1k.csv' : 'rig-wide.csv');
if (!existsSync(wide)) {
  console.error(`generating ${wide} …`);
  execFileSync(process.execPath, [join(root, 'bench', 'generate-wide.mjs'), '--rows', quick ? '1000' : '5000', '--channels', '2000', '--seed', '1', '--out', wide], { stdio: 'inherit' });
}
if (!existsSync(join(root, 'dist', 'cli', 'main.js'))) execFileSync('npm', ['run', 'build'], { cwd: root, stdio: 'inherit' });

const hasTime = spawnSync('/usr/bin/time', ['-f', '%M', 'true'], { encoding: 'utf8' }).status === 0;
const hasShuf = spawnSync('shuf', ['--version']).status === 0;
const hasDd = spawnSync('dd', ['--version']).status === 0;
const hasDuck = existsSync(join(root, 'bench', 'node_modules', '@duckdb', 'node-api'));
const cli = join(root, 'dist', 'cli', 'main.js');
const rowdeck = (...a) => [process.execPath, cli, ...a];
const out = join(tmp, 'out');

/** name, file, command, and what to clean after each run. */
const cases = [
  { name: 'cat', file: big, cmd: ['sh', '-c', `cat '${big}' > /dev/null`] },
  { name: 'cp', file: big, cmd: ['cp', big, join(tmp, 'copy.csv')], clean: join(tmp, 'copy.csv') },
  // cp may copy inside the kernel (copy_file_range, as coreutils 9 does here) without the bytes
  // reaching a program; dd reads and writes them through its own memory, 1 MiB at a time, as a
  // program that looks at every record must.
  ...(hasDd ? [{ name: 'dd', file: big, cmd: ['dd', `if=${big}`, `of=${join(tmp, 'dd.csv')}`, 'bs=1M', 'status=none'], clean: join(tmp, 'dd.csv') }] : []),
  ...(hasShuf ? [{ name: 'shuf', file: big, cmd: ['shuf', big, '-o', join(tmp, 'shuf.csv')], clean: join(tmp, 'shuf.csv') }] : []),
  { name: 'rowdeck-p8', file: big, cmd: rowdeck('shuffle', big, '--out', out, '--partitions', '8', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-strat', file: big, cmd: rowdeck('shuffle', big, '--out', out, '--partitions', '8', '--stratify', 'fault', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-strat-stats', file: big, cmd: rowdeck('shuffle', big, '--out', out, '--partitions', '8', '--stratify', 'fault', '--stats', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-folds', file: big, cmd: rowdeck('shuffle', big, '--out', out, '--partitions', '8', '--stratify', 'fault', '--folds', '5', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-strat-small', file: small, cmd: rowdeck('shuffle', small, '--out', out, '--partitions', '8', '--stratify', 'fault', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-mem64', file: big, cmd: rowdeck('shuffle', big, '--out', out, '--partitions', '8', '--stratify', 'fault', '--memory', '64MiB', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-mem64-small', file: small, cmd: rowdeck('shuffle', small, '--out', out, '--partitions', '8', '--stratify', 'fault', '--memory', '64MiB', '--seed', 'bench', '--force', '--quiet'), clean: out },
  // Many parts with statistics: each part's tables are read back from its file rather than kept
  // by every lane, so the peak stays near the 8-part run's.
  { name: 'rowdeck-stats-256-mem64-small', file: small, cmd: rowdeck('shuffle', small, '--out', out, '--partitions', '256', '--stats', '--memory', '64MiB', '--seed', 'bench', '--force', '--quiet'), clean: out },
  { name: 'rowdeck-profile', file: big, cmd: ['sh', '-c', `'${process.execPath}' '${cli}' profile '${big}' --quiet > /dev/null`] },
  // 2,000 columns x 5,000 records (61 MB): memory and time that grow with the column count.
  { name: 'rowdeck-profile-wide', file: wide, cmd: ['sh', '-c', `'${process.execPath}' '${cli}' profile '${wide}' --quiet > /dev/null`] },
  { name: 'rowdeck-stats-wide', file: wide, cmd: rowdeck('shuffle', wide, '--out', out, '--partitions', '8', '--stratify', 'rig_state', '--stats', '--seed', 'bench', '--force', '--quiet'), clean: out },
  ...(hasDuck
    ? [
        { name: 'sql-peer', file: big, cmd: [process.execPath, join(root, 'bench', 'duckdb-deal.mjs'), big, out], clean: out },
        { name: 'sql-peer-1g-cap', file: big, cmd: [process.execPath, join(root, 'bench', 'duckdb-deal.mjs'), big, out, '--memory-limit', '1GB'], clean: out },
      ]
    : []),
].filter((c) => !only || only.includes(c.name));

const hasSync = spawnSync('sync').status === 0;

function runOnce(c) {
  const cmd = hasTime ? ['/usr/bin/time', '-f', '%M', ...c.cmd] : c.cmd;
  // Every case starts with nothing left for the disk to write: a shuffle writes ~2.2 GB, and the
  // kernel writing back one run's output slowed the next one (the wall time of the cases depended
  // on their order). `sync` runs before the clock starts.
  if (hasSync) spawnSync('sync');
  const t0 = process.hrtime.bigint();
  const r = spawnSync(cmd[0], cmd.slice(1), { encoding: 'utf8', maxBuffer: 1 << 26 });
  const secs = Number(process.hrtime.bigint() - t0) / 1e9;
  if (c.clean) rmSync(c.clean, { recursive: true, force: true });
  if (r.status !== 0) throw new Error(`${c.name} failed (exit ${r.status}): ${r.stderr.slice(-2000)}`);
  const rssKb = hasTime ? Number(r.stderr.trim().split('\n').pop()) : NaN;
  return { secs, rssMiB: Number.isFinite(rssKb) ? rssKb / 1024 : null };
}

const median = (xs) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];
const results = {};
for (const c of cases) {
  process.stderr.write(`${c.name} … `);
  runOnce(c); // warm-up
  const samples = Array.from({ length: runs }, () => runOnce(c));
  const secs = median(samples.map((s) => s.secs));
  const rss = samples[0].rssMiB === null ? null : median(samples.map((s) => s.rssMiB));
  const mb = statSync(c.file).size / 1e6;
  results[c.name] = { file: c.file.replace(root + '/', ''), mb: Math.round(mb), secs, mbPerSec: mb / secs, peakRssMiB: rss, samples: samples.map((s) => s.secs) };
  process.stderr.write(`${secs.toFixed(2)} s\n`);
}

const r = (n) => results[n]?.secs;
const ratio = (a, b) => (a && b ? a / b : null);
const ratios = {
  'rowdeck-strat / shuf': ratio(r('rowdeck-strat'), r('shuf')),
  'rowdeck-strat / (2 x cp)': ratio(r('rowdeck-strat'), r('cp') && 2 * r('cp')),
  'rowdeck-strat / (2 x dd)': ratio(r('rowdeck-strat'), r('dd') && 2 * r('dd')),
  'rowdeck-strat big / small': ratio(r('rowdeck-strat'), r('rowdeck-strat-small')),
  'rowdeck-mem64 peak RSS MiB': results['rowdeck-mem64']?.peakRssMiB ?? null,
  'rowdeck-mem64-small peak RSS MiB': results['rowdeck-mem64-small']?.peakRssMiB ?? null,
  'rowdeck-stats-256-mem64-small peak RSS MiB': results['rowdeck-stats-256-mem64-small']?.peakRssMiB ?? null,
  'rowdeck-profile-wide peak RSS MiB': results['rowdeck-profile-wide']?.peakRssMiB ?? null,
  'rowdeck-stats-wide peak RSS MiB': results['rowdeck-stats-wide']?.peakRssMiB ?? null,
  'rowdeck-profile MB/s': results['rowdeck-profile']?.mbPerSec ?? null,
};
const commit = spawnSync('git', ['rev-parse', '--short', 'HEAD'], { cwd: root, encoding: 'utf8' }).stdout.trim();
const machine = { cpu: cpus()[0]?.model ?? 'unknown', cores: cpus().length, memoryGiB: Math.round(totalmem() / 2 ** 30), node: process.version, commit, date: new Date().toISOString().slice(0, 10), quick, runs };
const report = { machine, results, ratios };

const rows = Object.entries(results).map(([name, x]) =>
  `| ${name} | ${x.mb} MB | ${x.secs.toFixed(2)} | ${x.mbPerSec.toFixed(0)} | ${x.peakRssMiB === null ? 'n/a' : x.peakRssMiB.toFixed(0)} |`,
);
const table = ['| case | input | wall s (median) | MB/s | peak RSS MiB |', '|---|---|---|---|---|', ...rows].join('\n');
const ratioRows = Object.entries(ratios)
  .filter(([, v]) => v !== null)
  .map(([k, v]) => `| ${k} | ${v.toFixed(2)} |`)
  .join('\n');
console.log(`\n${machine.cpu}, ${machine.cores} cores, ${machine.memoryGiB} GiB, Node ${machine.node}, commit ${commit}\n\n${table}\n\n| ratio | value |\n|---|---|\n${ratioRows}`);

mkdirSync(join(root, 'bench', 'results'), { recursive: true });
writeFileSync(join(root, 'bench', 'results', quick ? 'quick.json' : 'latest.json'), JSON.stringify(report, null, 2) + '\n');
if (!quick) {
  const doc = join(root, 'docs', 'benchmarks.md');
  const start = '<!-- shuffle-bench:start -->';
  const end = '<!-- shuffle-bench:end -->';
  const section = `${start}
Generated by \`npm run bench\` (bench/run.mjs) from bench/results/latest.json — do not edit by hand.

Machine: ${machine.cpu}, ${machine.cores} cores, ${machine.memoryGiB} GiB; Node ${machine.node}; commit ${commit}; ${machine.date}.
Median of ${runs} runs after a warm-up, each after \`sync\`; files from \`bench/generate.mjs\` (sorted by the 5-class \`fault\` column) and, for the two wide cases, \`bench/generate-wide.mjs\` (2,002 columns).

${table}

| ratio (same run) | value |
|---|---|
${ratioRows}
${end}`;
  let text = existsSync(doc) ? readFileSync(doc, 'utf8') : '# Benchmarks\n';
  text = text.includes(start) ? text.replace(new RegExp(`${start}[\\s\\S]*${end}`), section) : `${text.trimEnd()}\n\n## Shuffle\n\n${section}\n`;
  writeFileSync(doc, text);
}
