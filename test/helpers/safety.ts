/**
 * Helpers for the safety tests: the built CLI run in a child process (optionally as an
 * unprivileged user, under a low open-file limit, or inside a private mount namespace with a small
 * tmpfs), and snapshots of folders to prove that a failed run changed nothing.
 */
import { spawn, spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { chmodSync, existsSync, lstatSync, mkdirSync, readdirSync, readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';

export const CLI = resolve('dist/cli/main.cjs');

export interface Run {
  status: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
}

export interface RunOptions {
  cwd: string;
  env?: Record<string, string>;
  input?: string;
  /** Run as this user and group (needs root). */
  as?: { uid: number; gid: number };
  timeoutMs?: number;
}

/** Runs `node dist/cli/main.cjs ...args` and collects its output (never throws for a non-zero exit). */
export function runRowdeck(args: string[], o: RunOptions): Promise<Run> {
  return runProcess(process.execPath, [CLI, ...args], o);
}

export function runProcess(cmd: string, args: string[], o: RunOptions): Promise<Run> {
  return new Promise((res, rej) => {
    const child = spawn(cmd, args, {
      cwd: o.cwd,
      env: { ...process.env, ...o.env },
      stdio: ['pipe', 'pipe', 'pipe'],
      ...(o.as ? { uid: o.as.uid, gid: o.as.gid } : {}),
    });
    let stdout = '';
    let stderr = '';
    child.stdout.setEncoding('utf8').on('data', (t: string) => (stdout += t));
    child.stderr.setEncoding('utf8').on('data', (t: string) => (stderr += t));
    child.on('error', rej);
    const timer = setTimeout(() => child.kill('SIGKILL'), o.timeoutMs ?? 60_000);
    child.on('close', (status, signal) => {
      clearTimeout(timer);
      res({ status, signal, stdout, stderr });
    });
    child.stdin.on('error', () => {});
    child.stdin.end(o.input ?? '');
  });
}

/** The coded error a run printed (`rowdeck: error CODE: message`), or null. */
export function printedError(stderr: string): { code: string; message: string } | null {
  const m = /^rowdeck: error (RDK_[A-Z_]+): (.*)$/m.exec(stderr);
  return m ? { code: m[1]!, message: m[2]! } : null;
}

/**
 * Every entry under `dir` (files with a hash of their bytes, folders, other kinds by type), to
 * compare before and after a run. Entries named in `ignore` (top level) are left out.
 */
export function snapshot(dir: string, ignore: string[] = []): Map<string, string> {
  const out = new Map<string, string>();
  const walk = (rel: string): void => {
    const abs = rel === '' ? dir : join(dir, rel);
    for (const name of readdirSync(abs).sort()) {
      if (rel === '' && ignore.includes(name)) continue;
      const r = rel === '' ? name : join(rel, name);
      const st = lstatSync(join(dir, r));
      if (st.isDirectory()) {
        out.set(r, `dir ${(st.mode & 0o7777).toString(8)}`);
        walk(r);
      } else if (st.isFile()) {
        let h = 'unreadable';
        try {
          h = createHash('sha256').update(readFileSync(join(dir, r))).digest('hex');
        } catch {
          // (kept as 'unreadable')
        }
        out.set(r, `file ${(st.mode & 0o7777).toString(8)} ${h}`);
      } else out.set(r, st.isFIFO() ? 'fifo' : st.isSymbolicLink() ? 'symlink' : 'other');
    }
  };
  walk('');
  return out;
}

/** What differs between two snapshots: entries added, removed or changed. */
export function diffSnapshots(before: Map<string, string>, after: Map<string, string>): string[] {
  const d: string[] = [];
  for (const [k, v] of after) if (!before.has(k)) d.push(`+ ${k}`);
  else if (before.get(k) !== v) d.push(`~ ${k}`);
  for (const k of before.keys()) if (!after.has(k)) d.push(`- ${k}`);
  return d.sort();
}

/** rowdeck's work entries anywhere under `dir` (staging, spill, locks), as paths relative to it. */
export function workEntries(dir: string): string[] {
  const found: string[] = [];
  const walk = (rel: string, depth: number): void => {
    let names: string[];
    try {
      names = readdirSync(rel === '' ? dir : join(dir, rel));
    } catch {
      return;
    }
    for (const name of names) {
      const r = rel === '' ? name : join(rel, name);
      if (/^\.rowdeck-(?:spill|partial)-/.test(name) || name.endsWith('.rowdeck-lock') || name === '.rowdeck-lock') found.push(r);
      else if (depth < 3) {
        try {
          if (lstatSync(join(dir, r)).isDirectory()) walk(r, depth + 1);
        } catch {
          // gone
        }
      }
    }
  };
  walk('', 0);
  return found.sort();
}

/** uid and gid of an unprivileged account when this process may switch to it (root), else null. */
export function unprivilegedUser(): { uid: number; gid: number } | null {
  if (typeof process.getuid !== 'function' || process.getuid() !== 0) return null;
  const ids = { uid: 65534, gid: 65534 };
  const r = spawnSync(process.execPath, ['-e', 'process.exit(process.getuid() === 65534 ? 0 : 3)'], { uid: ids.uid, gid: ids.gid, cwd: '/' });
  return r.status === 0 ? ids : null;
}

/** Whether permission bits bind this process (false for root, which ignores them). */
export function permissionsBind(): boolean {
  return typeof process.getuid === 'function' && process.getuid() !== 0;
}

/** Whether a private mount namespace with a tmpfs can be made here (root with CAP_SYS_ADMIN and util-linux's unshare). */
export function canMountTmpfs(scratch: string): boolean {
  const dir = join(scratch, 'mount-probe');
  mkdirSync(dir, { recursive: true });
  const r = spawnSync('unshare', ['-m', '--propagation', 'private', 'sh', '-c', `mount -t tmpfs -o size=64k tmpfs '${dir}'`], { encoding: 'utf8' });
  return r.status === 0;
}

/**
 * Runs a shell script inside a private mount namespace (mounts made there vanish with it): the
 * script mounts what it needs, runs rowdeck and prints what the test checks.
 */
export function runInNamespace(script: string, cwd: string, env: Record<string, string> = {}): Promise<Run> {
  return runProcess('unshare', ['-m', '--propagation', 'private', 'sh', '-c', script], { cwd, env, timeoutMs: 120_000 });
}

/** Makes `dir` and the folders above it up to `root` enterable and writable by anyone (for runs as another user). */
export function openUp(dir: string): void {
  chmodSync(dir, 0o777);
}

export function exists(p: string): boolean {
  return existsSync(p);
}
