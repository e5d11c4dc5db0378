// Running one command and measuring it: wall time, CPU time, peak RSS, page faults and the bytes it
// wrote, with whatever this machine offers (each figure is null where a tool is missing).
//
// - Wall time: the clock around the whole spawn (includes ~2-5 ms for the wrappers below).
// - GNU time (`/usr/bin/time`, Debian package `time`): peak RSS (%M, the largest of the process
//   tree, not a sum), user and system CPU, page faults, context switches.
// - Bytes written: the command runs as a child of `sh`, which after waiting for it copies its own
//   /proc/$$/io to fd 3. Linux adds a reaped child's I/O counts (and those of its threads) to the
//   parent's, so the shell's file holds the command's totals, worker threads and grandchildren
//   included. `write_bytes` counts what the command dirtied in the page cache (what would reach the
//   disk), `cancelled_write_bytes` what was dropped before writeback (a file removed or truncated
//   first), `wchar` everything passed to write calls, pipes and /dev/null included.
import { spawnSync } from 'node:child_process';
import { closeSync, existsSync, openSync, readFileSync, rmSync, statfsSync, writeSync } from 'node:fs';
import { cpus, loadavg, release, totalmem } from 'node:os';
import { join, relative } from 'node:path';

const GNU_TIME = '/usr/bin/time';
const TIME_FORMAT = 'gnutime %e %U %S %M %O %F %R %c %w';
const WRAP =
  '"$@"; x=$?; if [ -r /proc/$$/io ]; then while IFS= read -r l; do printf "%s\\n" "$l"; done < /proc/$$/io >&3; fi; exit $x';

/** Which measuring tools this machine has. */
export function detectTools() {
  const ok = (cmd, args) => {
    try {
      return spawnSync(cmd, args, { stdio: 'ignore' }).status === 0;
    } catch {
      return false;
    }
  };
  return {
    gnuTime: ok(GNU_TIME, ['-f', '%M', 'true']),
    procIo: existsSync('/proc/self/io'),
    sync: ok('sync', []),
  };
}

/** Parses the lines of a /proc/PID/io file into numbers ({ write_bytes: …, … }). */
export function parseProcIo(text) {
  const io = {};
  for (const line of text.split('\n')) {
    const m = /^(\w+):\s*(\d+)$/.exec(line.trim());
    if (m) io[m[1]] = Number(m[2]);
  }
  return 'write_bytes' in io ? io : null;
}

/** Parses GNU time's line for TIME_FORMAT (the file may start with "Command exited with …"). */
export function parseGnuTime(text) {
  const line = text.split('\n').find((l) => l.startsWith('gnutime '));
  if (!line) return null;
  const [, , user, sys, maxKb, outBlocks, major, minor, invol, vol] = line.trim().split(/\s+/).map(Number);
  return { userS: user, sysS: sys, peakRssMiB: maxKb / 1024, outBlocks, majorFaults: major, minorFaults: minor, involuntarySwitches: invol, voluntarySwitches: vol };
}

/**
 * Variables left out of every measured command's environment. NODE_EXTRA_CA_CERTS makes Node read
 * and parse that CA bundle as it starts, before any code of the command runs (0.04 s of a 0.10 s
 * start on this VM, which sets it for its proxies); rowdeck opens no TLS connection, and a plan's
 * ten processes would pay it ten times where `shuffle` pays it once. The machine line names what
 * was left out.
 */
export const LEFT_OUT_ENV = ['NODE_EXTRA_CA_CERTS'];

/** The environment measured commands run in: this one without LEFT_OUT_ENV. */
export function commandEnv(env = process.env) {
  const out = { ...env };
  for (const name of LEFT_OUT_ENV) delete out[name];
  return out;
}

/**
 * Runs argv once and measures it. `sync` first (when asked), so that no run pays for the writeback
 * of the one before it. stdout goes to /dev/null; stderr is kept for errors.
 */
export function measure(argv, { tools, scratch, sync = true }) {
  if (sync && tools.sync) spawnSync('sync');
  const timeFile = join(scratch, 'gnu-time.txt');
  const wrapped = ['sh', '-c', WRAP, 'sh', ...argv];
  const full = tools.gnuTime ? [GNU_TIME, '-o', timeFile, '-f', TIME_FORMAT, ...wrapped] : wrapped;
  const t0 = process.hrtime.bigint();
  const r = spawnSync(full[0], full.slice(1), { stdio: ['ignore', 'ignore', 'pipe', 'pipe'], encoding: 'utf8', maxBuffer: 1 << 26, env: commandEnv() });
  const wallS = Number(process.hrtime.bigint() - t0) / 1e9;
  let time = null;
  if (tools.gnuTime && existsSync(timeFile)) {
    time = parseGnuTime(readFileSync(timeFile, 'utf8'));
    rmSync(timeFile, { force: true });
  }
  const io = parseProcIo(r.output?.[3] ?? '');
  return {
    ok: r.status === 0,
    status: r.status,
    error: r.status === 0 ? null : (r.error?.message ?? r.stderr.slice(-2000)),
    wallS,
    userS: time?.userS ?? null,
    sysS: time?.sysS ?? null,
    peakRssMiB: time?.peakRssMiB ?? null,
    minorFaults: time?.minorFaults ?? null,
    majorFaults: time?.majorFaults ?? null,
    writtenBytes: io?.write_bytes ?? (time ? time.outBlocks * 512 : null),
    cancelledBytes: io?.cancelled_write_bytes ?? null,
    writeCallBytes: io?.wchar ?? null,
    writeCalls: io?.syscw ?? null,
    readCalls: io?.syscr ?? null,
  };
}

/** Bytes free for an unprivileged writer on the file system holding `path` (as `df -B1 --output=avail`). */
export function freeBytes(path) {
  const s = statfsSync(path);
  return s.bavail * s.bsize;
}

/** MemAvailable from /proc/meminfo in bytes, or the OS's total where it cannot be read. */
export function availableMemory() {
  try {
    const m = /MemAvailable:\s+(\d+) kB/.exec(readFileSync('/proc/meminfo', 'utf8'));
    if (m) return Number(m[1]) * 1024;
  } catch {
    // not Linux
  }
  return totalmem();
}

/** The machine and the builds a run measured, for the report. */
export function machineInfo(root, builds) {
  const git = (dir, ...a) => spawnSync('git', ['-C', dir, ...a], { encoding: 'utf8' }).stdout?.trim() || null;
  const commitOf = (dir) => {
    const c = git(dir, 'rev-parse', '--short', 'HEAD');
    if (!c) return 'unknown';
    return git(dir, 'status', '--porcelain', '--untracked-files=no', '--', 'src', 'package.json') ? `${c}+changes` : c;
  };
  const timeVersion = spawnSync(GNU_TIME, ['--version'], { encoding: 'utf8' });
  return {
    cpu: cpus()[0]?.model ?? 'unknown',
    cores: cpus().length,
    memoryGiB: Math.round(totalmem() / 2 ** 30),
    node: process.version,
    kernel: release(),
    commit: commitOf(root),
    builds: builds.map((b) => ({ label: b.label, cli: relative(root, b.cli), commit: commitOf(b.dir) })),
    loadAverage: loadavg().map((x) => Math.round(x * 100) / 100),
    gnuTime: timeVersion.status === 0 ? timeVersion.stdout.split('\n')[0] || timeVersion.stderr.split('\n')[0] : null,
    date: new Date().toISOString(),
    leftOutEnv: LEFT_OUT_ENV.filter((name) => name in process.env),
  };
}

/**
 * What writing into memory the kernel has not used lately costs here: seconds of wall time per GiB
 * for a new file of `mib` MiB in 1 MiB writes, after a pause in which memory freed before it goes
 * back to a VM's host. On this VM it has ranged from ~0.2 to ~2 s/GiB from hour to hour (the host
 * backs the guest's memory again on first touch), and a run that writes more new pages than
 * another (a plan's tasks against one process) moves with it. Printed with every run's machine.
 */
export function freshWriteCost(dir, mib = 512, pauseS = 3) {
  Atomics.wait(new Int32Array(new SharedArrayBuffer(4)), 0, 0, pauseS * 1000);
  const path = join(dir, 'fresh-write-probe');
  const chunk = Buffer.alloc(1 << 20, 'x,1,2.5\n');
  const t = performance.now();
  const fd = openSync(path, 'w');
  try {
    for (let i = 0; i < mib; i++) writeSync(fd, chunk);
  } finally {
    closeSync(fd);
  }
  const s = (performance.now() - t) / 1000;
  rmSync(path, { force: true });
  return Math.round((s * 1024 * 100) / mib) / 100;
}
