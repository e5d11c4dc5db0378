#!/usr/bin/env node
// Speed of `rowdeck profile` (every column) on one file: runs the built CLI --runs times and prints,
// per run, wall time and MB/s, and the child's CPU time (user + system, all its threads).
//
//   npm run build && node bench/profile.mjs [path.csv] [--runs 3] [--threads N] [-- more profile options]
//
// Without a path, bench/data/readings-1g.csv is used (generated first if absent: bench/generate.mjs,
// seed 1, about 1 GB). The machine may be shared: wall time well above CPU time / cores means other
// work held the cores, so both are printed. CPU time of the child is read from /proc/self/stat
// (cutime + cstime, Linux only; shown as "?" elsewhere).
import { spawnSync, execFileSync } from 'node:child_process';
import { existsSync, readFileSync, statSync } from 'node:fs';
import { cpus, loadavg } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const here = dirname(fileURLToPath(import.meta.url));
const cli = join(here, '..', 'dist', 'cli', 'main.cjs');
const args = process.argv.slice(2);
const dash = args.indexOf('--');
const extra = dash >= 0 ? args.splice(dash).slice(1) : [];
let path = null;
let runs = 3;
let threads = null;
for (let i = 0; i < args.length; i++) {
  if (args[i] === '--runs') runs = Number(args[++i]);
  else if (args[i] === '--threads') threads = args[++i];
  else path = args[i];
}
if (!path) {
  path = join(here, 'data', 'readings-1g.csv');
  if (!existsSync(path)) {
    process.stderr.write(`generating ${path} …\n`);
    execFileSync(process.execPath, [join(here, 'generate.mjs'), '--bytes', '1e9', '--seed', '1', '--out', path], { stdio: 'inherit' });
  }
}

/** CPU seconds of waited-for children (Linux), or null. */
function childCpuSeconds() {
  try {
    const stat = readFileSync('/proc/self/stat', 'utf8');
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    // After the command name: field 3 is state, so cutime (16) and cstime (17) are at 13 and 14.
    return (Number(f[13]) + Number(f[14])) / 100; // USER_HZ is 100 on Linux
  } catch {
    return null;
  }
}

const size = statSync(path).size;
console.log(`${path}: ${(size / 1e6).toFixed(0)} MB; ${cpus().length} × ${cpus()[0]?.model ?? '?'}; Node ${process.version}; load ${loadavg().map((x) => x.toFixed(1)).join(' ')}`);
let bestWall = Infinity;
let bestCpu = Infinity;
for (let r = 0; r < runs; r++) {
  const cmd = [cli, 'profile', path, '--json', '--quiet', ...(threads ? ['--threads', threads] : []), ...extra];
  const c0 = childCpuSeconds();
  const t0 = process.hrtime.bigint();
  const res = spawnSync(process.execPath, cmd, { encoding: 'utf8', maxBuffer: 1 << 28 });
  const wall = Number(process.hrtime.bigint() - t0) / 1e9;
  const c1 = childCpuSeconds();
  if (res.status !== 0) {
    process.stderr.write(res.stderr);
    process.exit(1);
  }
  const p = JSON.parse(res.stdout);
  const cpu = c0 === null || c1 === null ? null : c1 - c0;
  bestWall = Math.min(bestWall, wall);
  if (cpu !== null) bestCpu = Math.min(bestCpu, cpu);
  console.log(
    `run ${r + 1}: ${p.records.toLocaleString('en-US')} records, ${p.threads} worker thread(s): wall ${wall.toFixed(2)} s = ${(size / 1e6 / wall).toFixed(0)} MB/s; ` +
      `CPU ${cpu === null ? '?' : `${cpu.toFixed(2)} s (${((cpu * 1e9) / p.records).toFixed(0)} ns/record, all threads)`}`,
  );
}
console.log(`best: wall ${bestWall.toFixed(2)} s = ${(size / 1e6 / bestWall).toFixed(0)} MB/s${Number.isFinite(bestCpu) ? `; CPU ${bestCpu.toFixed(2)} s` : ''}`);
