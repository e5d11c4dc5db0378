/**
 * Faults of the environment, made for real: a full disk and a read-only file system (a small
 * tmpfs in a private mount namespace, which vanishes with it; needs root, as CI runs), a mount
 * point as --out, a low open-file limit (`ulimit -n`, POSIX sh), and two runs writing the same
 * --out at once. Each fault must end in a coded error naming the path and the reason, exit 1, and
 * leave nothing behind; the runs that can succeed must give a verified output.
 */
import { execFileSync, spawn } from 'node:child_process';
import { mkdirSync, readdirSync, readFileSync, statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { shuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import { makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';
import { canMountTmpfs, CLI, printedError, runInNamespace, runProcess, runRowdeck, workEntries } from './helpers/safety.js';

let dir: string;
let input: string;
let mounts = false;
let pageKiB = 4;
const MOUNT_SKIP = 'tmpfs cases skipped: they need root in a private mount namespace (util-linux unshare, CAP_SYS_ADMIN); CI (.ci/run) runs as root';

beforeAll(() => {
  dir = makeTempDir('rowdeck-env-');
  input = join(dir, 'readings.csv');
  writeFileSync(input, makeSensorCsv({ rows: 20_000, seed: 9 }));
  mounts = canMountTmpfs(dir);
  try {
    pageKiB = Number(execFileSync('getconf', ['PAGESIZE'], { encoding: 'utf8' })) / 1024;
  } catch {
    pageKiB = 4;
  }
});
afterAll(() => removeDir(dir));

/** A shell script: mount a tmpfs of `kib` KiB (options `opts`) on `mnt`, run rowdeck (its standard input from `stdin`), then list what is left in the tmpfs. */
function onTmpfs(mnt: string, kib: number, args: string[], opts = '', stdin: string | null = null): string {
  const quoted = args.map((a) => `'${a}'`).join(' ');
  return [
    `mount -t tmpfs -o size=${kib}k${opts ? `,${opts}` : ''} tmpfs '${mnt}' || exit 97`,
    `'${process.execPath}' '${CLI}' ${quoted}${stdin ? ` < '${stdin}'` : ''}`,
    'echo "rc=$?"',
    `find '${mnt}' -mindepth 1 | sed 's/^/left: /'`,
  ].join('\n');
}

function leftIn(stdout: string): string[] {
  return stdout.split('\n').filter((l) => l.startsWith('left: '));
}

function rcOf(stdout: string): number {
  return Number(/rc=(\d+)/.exec(stdout)?.[1] ?? -1);
}

describe('a full disk', () => {
  // From standard input, whose size is not known before it ends, the run cannot check the free
  // space first (see 'too little room' below): it meets the full disk as it writes. A small
  // budget puts the spill in files.
  it.each([
    ['the spill (--temp-dir) on a full disk', 'spill', false],
    ['the parts on a full disk', 'parts', false],
    ['the parts on a full disk, --gzip', 'parts', true],
  ] as const)('%s: RDK_DISK_FULL naming the file, nothing left on either disk', async (_name, where, gzip) => {
    if (!mounts) return console.log(MOUNT_SKIP);
    const mnt = join(dir, `full-${where}-${gzip}`);
    const elsewhere = join(dir, `other-${where}-${gzip}`);
    mkdirSync(mnt);
    mkdirSync(elsewhere);
    const common = ['--partitions', '4', '--threads', '2', '--memory', '4MiB', '--format', 'csv', '--quiet'];
    const args =
      where === 'spill'
        ? ['shuffle', '-', '--out', join(elsewhere, 'out'), '--temp-dir', mnt, ...common]
        : ['shuffle', '-', '--out', join(mnt, 'out'), '--temp-dir', elsewhere, ...common];
    if (gzip) args.push('--gzip');
    const r = await runInNamespace(onTmpfs(mnt, 96, args, '', input), dir);
    expect(rcOf(r.stdout), r.stderr).toBe(1);
    const e = printedError(r.stderr);
    expect(e?.code, r.stderr).toBe('RDK_DISK_FULL');
    expect(e!.message).toMatch(where === 'spill' ? /\.rowdeck-spill-\d+-\w+\/scatter-\d+-\d+\.spill: writing a spill file failed: no space left on the device/ : /part-\d+\.csv(\.gz)?: writing an output file failed: no space left on the device/);
    expect(r.stderr).not.toContain('internal error');
    expect(leftIn(r.stdout)).toEqual([]);
    expect(readdirSync(elsewhere)).toEqual([]);
  });

  it('the manifest does not fit after the parts did: RDK_DISK_FULL naming manifest.json, nothing left', async () => {
    if (!mounts) return console.log(MOUNT_SKIP);
    // The parts' size, from a run elsewhere (the same seed gives the same bytes).
    const ref = join(dir, 'manifest-ref');
    const m = await shuffle({ inputs: [input], out: ref, partitions: 3 });
    const pages = m.output.parts.reduce((a, p) => a + Math.ceil(p.bytes / (pageKiB * 1024)), 0);
    const mnt = join(dir, 'full-manifest');
    const spill = join(dir, 'full-manifest-spill');
    mkdirSync(mnt);
    // Room for the parts and the lock file (a page each, at least), none for the manifest.
    const r = await runInNamespace(onTmpfs(mnt, (pages + 1) * pageKiB, ['shuffle', input, '--out', join(mnt, 'out'), '--temp-dir', spill, '--partitions', '3', '--quiet']), dir);
    expect(rcOf(r.stdout), r.stderr).toBe(1);
    expect(printedError(r.stderr)).toMatchObject({ code: 'RDK_DISK_FULL', message: expect.stringMatching(/manifest\.json: writing the manifest failed: no space left on the device/) });
    expect(leftIn(r.stdout)).toEqual([]);
    // The spill folder it made is gone too.
    expect(readdirSync(dir).filter((n) => n === 'full-manifest-spill')).toEqual([]);
    // One page more and it fits: the size was right.
    const ok = await runInNamespace(onTmpfs(mnt, (pages + 2) * pageKiB, ['shuffle', input, '--out', join(mnt, 'out'), '--temp-dir', spill, '--partitions', '3', '--quiet']), dir);
    expect(rcOf(ok.stdout), ok.stderr).toBe(0);
  });
});

describe('too little room, found before any work', () => {
  /** Figures in the message: "needs about 2.1 MB there (…), and 96 kB is free". */
  const figures = /needs about [\d.]+ (kB|MB|GB) there \(.*\), and [\d.]+ (kB|MB|GB) is free\..*--temp-dir/;

  it.each([
    ['the spill folder (--temp-dir)', 'spill'],
    ['--out', 'parts'],
    ['one disk for both', 'both'],
  ] as const)('%s too small for the estimate: RDK_NO_SPACE naming it, both figures and --temp-dir; nothing written', async (_name, where) => {
    if (!mounts) return console.log(MOUNT_SKIP);
    const mnt = join(dir, `short-${where}`);
    const elsewhere = join(dir, `short-other-${where}`);
    mkdirSync(mnt);
    mkdirSync(elsewhere);
    // A budget smaller than the spill: it goes to files (about 1.3 times the input).
    const common = ['--partitions', '4', '--threads', '2', '--memory', '1MiB', '--quiet'];
    const [out, temp] = where === 'spill' ? [join(elsewhere, 'out'), mnt] : where === 'parts' ? [join(mnt, 'out'), elsewhere] : [join(mnt, 'out'), join(mnt, 'spill')];
    // Half the input's size: room for neither the spill nor the parts.
    const kib = Math.floor(statSync(input).size / 2 / 1024);
    const r = await runInNamespace(onTmpfs(mnt, kib, ['shuffle', input, '--out', out, '--temp-dir', temp, ...common]), dir);
    expect(rcOf(r.stdout), r.stderr).toBe(1);
    const e = printedError(r.stderr);
    expect(e?.code, r.stderr).toBe('RDK_NO_SPACE');
    expect(e!.message).toMatch(figures);
    // The folder named is the one that is short, as the user gave it.
    expect(e!.message.startsWith(`${where === 'parts' ? out : temp}: not enough free space`)).toBe(true);
    if (where === 'both') expect(e!.message).toMatch(/spill files of ~[\d.]+ (kB|MB) and parts of ~[\d.]+ (kB|MB)/);
    expect(leftIn(r.stdout)).toEqual([]);
    expect(readdirSync(elsewhere)).toEqual([]);
  });

  it('the memory layout needs no room for the spill: a --temp-dir with none is not in its way', async () => {
    if (!mounts) return console.log(MOUNT_SKIP);
    const mnt = join(dir, 'no-room-memory');
    mkdirSync(mnt);
    const out = join(dir, 'no-room-memory-out');
    // 64 KiB: no room for any spill file; the input's spill fits the 256 MiB budget.
    const r = await runInNamespace(onTmpfs(mnt, 64, ['shuffle', input, '--out', out, '--temp-dir', mnt, '--partitions', '4', '--threads', '2', '--memory', '256MiB', '--json', '--quiet']), dir);
    expect(rcOf(r.stdout), r.stderr).toBe(0);
    const manifest = JSON.parse(r.stdout.slice(0, r.stdout.lastIndexOf('}') + 1)) as { run: { layout: string } };
    expect(manifest.run.layout).toBe('memory');
    expect(leftIn(r.stdout)).toEqual([]);
    expect((await verify({ dir: out })).ok).toBe(true);
  });
});

describe('read-only file systems and mount points', () => {
  it('--out or --temp-dir on a read-only file system: RDK_PERMISSION, "read-only file system"', async () => {
    if (!mounts) return console.log(MOUNT_SKIP);
    const mnt = join(dir, 'ro');
    mkdirSync(mnt);
    for (const args of [
      ['shuffle', input, '--out', join(mnt, 'out')],
      ['shuffle', input, '--out', join(dir, 'ro-out'), '--temp-dir', mnt],
    ]) {
      const r = await runInNamespace(onTmpfs(mnt, 64, args, 'ro'), dir);
      expect(rcOf(r.stdout), r.stderr).toBe(1);
      expect(printedError(r.stderr)).toMatchObject({ code: 'RDK_PERMISSION', message: expect.stringContaining('failed: read-only file system') });
      expect(workEntries(dir)).toEqual([]);
    }
    expect(readdirSync(dir).includes('ro-out')).toBe(false);
  });

  it('an empty mount point as --out is written in place (its group and setgid bit kept); --force there is refused', async () => {
    if (!mounts) return console.log(MOUNT_SKIP);
    const mnt = join(dir, 'mounted');
    mkdirSync(mnt);
    const script = [
      `mount -t tmpfs -o size=8m,mode=2775 tmpfs '${mnt}' || exit 97`,
      `chgrp 100 '${mnt}'`,
      `'${process.execPath}' '${CLI}' shuffle '${input}' --out '${mnt}' --partitions 2 --quiet; echo "rc=$?"`,
      `stat -c 'mode=%a group=%g' '${mnt}'`,
      `ls -A '${mnt}' | sed 's/^/entry: /'`,
      `'${process.execPath}' '${CLI}' verify '${mnt}' --quiet; echo "verify=$?"`,
      `'${process.execPath}' '${CLI}' shuffle '${input}' --out '${mnt}' --partitions 3 --force 2>&1; echo "force=$?"`,
    ].join('\n');
    const r = await runInNamespace(script, dir);
    expect(rcOf(r.stdout), r.stderr).toBe(0);
    expect(r.stdout).toContain('mode=2775 group=100');
    expect(r.stdout.split('\n').filter((l) => l.startsWith('entry: '))).toEqual(['entry: manifest.json', 'entry: part-00000.csv', 'entry: part-00001.csv']);
    expect(r.stdout).toContain('verify=0');
    expect(r.stdout).toMatch(/RDK_FORCE_REFUSED: .*mounted: --force is refused here: it is a mount point/);
    expect(r.stdout).toContain('force=1');
  });
});

describe('open files', () => {
  it('3,000 parts under `ulimit -n 256`: open files stay bounded, and the output verifies', async () => {
    const out = join(dir, 'many-parts');
    const r = await runProcess('sh', ['-c', `ulimit -n 256 && exec "${process.execPath}" "${CLI}" shuffle "${input}" --out "${out}" --partitions 3000 --quiet`], { cwd: dir });
    expect(r.status, r.stderr).toBe(0);
    expect(readdirSync(out).length).toBe(3001);
    const v = await verify({ dir: out });
    expect(v.mismatches).toEqual([]);
  });

  it('with the bound lifted (the old behaviour, one descriptor a part) it fails, as a coded error with the path', async () => {
    const out = join(dir, 'many-parts-unbounded');
    const r = await runProcess('sh', ['-c', `ulimit -n 256 && exec "${process.execPath}" "${CLI}" shuffle "${input}" --out "${out}" --partitions 3000 --quiet`], { cwd: dir, env: { ROWDECK_OPEN_PARTS: '100000' } });
    expect(r.status).toBe(1);
    expect(printedError(r.stderr)).toMatchObject({ code: 'RDK_TOO_MANY_OPEN_FILES', message: expect.stringMatching(/part-\d+\.csv: creating an output file failed: too many open files/) });
    expect(workEntries(dir)).toEqual([]);
  });
});

describe('two runs, one --out', () => {
  it('started together, three times: one writes, the other fails with a coded error; the output verifies', async () => {
    for (let round = 0; round < 3; round++) {
      const out = join(dir, `race-${round}`);
      const args = ['shuffle', input, '--out', out, '--partitions', '4', '--stratify', 'fault', '--seed', 'race', '--quiet'];
      const [a, b] = await Promise.all([runRowdeck(args, { cwd: dir }), runRowdeck(args, { cwd: dir })]);
      const ok = [a, b].filter((r) => r.status === 0);
      const failed = [a, b].filter((r) => r.status !== 0);
      expect(ok.length, `${a.stderr}\n${b.stderr}`).toBe(1);
      expect(failed[0]!.status).toBe(1);
      expect(['RDK_OUTPUT_LOCKED', 'RDK_OUTPUT_EXISTS']).toContain(printedError(failed[0]!.stderr)?.code);
      expect((await verify({ dir: out })).ok).toBe(true);
      expect(workEntries(dir)).toEqual([]);
    }
  });

  it('a second run while the first works (paused while it holds the lock): RDK_OUTPUT_LOCKED at once, nothing of the first lost', async () => {
    const out = join(dir, 'race-late');
    const args = ['shuffle', input, '--out', out, '--partitions', '4', '--seed', 'late', '--quiet'];
    const first = spawn(process.execPath, [CLI, ...args], { cwd: dir, stdio: ['ignore', 'ignore', 'pipe'] });
    let firstErr = '';
    first.stderr.setEncoding('utf8').on('data', (t: string) => (firstErr += t));
    const firstDone = new Promise<number | null>((res) => first.on('close', (code) => res(code)));
    // Once the first holds the lock, it is paused (SIGSTOP) while the second tries.
    for (let i = 0; i < 4000 && !readdirSync(dir).includes('.race-late.rowdeck-lock'); i++) await new Promise((r) => setTimeout(r, 2));
    first.kill('SIGSTOP');
    try {
      for (const extra of [[], ['--force']]) {
        const second = await runRowdeck([...args, ...extra], { cwd: dir });
        expect(second.status, second.stderr).toBe(1);
        expect(printedError(second.stderr)).toMatchObject({ code: 'RDK_OUTPUT_LOCKED', message: expect.stringContaining(`run ${first.pid} on `) });
      }
    } finally {
      first.kill('SIGCONT');
    }
    expect(await firstDone, firstErr).toBe(0);
    const v = await verify({ dir: out });
    expect(v.ok).toBe(true);
    expect(JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')).seed).toBe('late');
    expect(workEntries(dir)).toEqual([]);
  });
});

