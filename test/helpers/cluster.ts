/** Helpers for the cluster tests: running a plan's tasks as processes, and comparing outputs. */
import { spawn } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { ClusterPlan } from '../../src/cluster/plan.js';

export const CLI = fileURLToPath(new URL('../../dist/cli/main.cjs', import.meta.url));

export interface Ran {
  status: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
}

/** Runs rowdeck as a process; `killAfterMs` sends SIGKILL then. */
export function rowdeck(args: string[], o: { env?: NodeJS.ProcessEnv; cwd?: string; killAfterMs?: number } = {}): Promise<Ran> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, [CLI, ...args], { cwd: o.cwd, env: { ...process.env, ...o.env }, stdio: ['ignore', 'pipe', 'pipe'] });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d: Buffer) => (stdout += d.toString()));
    child.stderr.on('data', (d: Buffer) => (stderr += d.toString()));
    const timer = o.killAfterMs !== undefined ? setTimeout(() => child.kill('SIGKILL'), o.killAfterMs) : null;
    child.on('error', reject);
    child.on('close', (status, signal) => {
      if (timer) clearTimeout(timer);
      resolve({ status, signal, stdout, stderr });
    });
  });
}

export function readPlan(work: string): ClusterPlan {
  return JSON.parse(readFileSync(join(work, 'plan.json'), 'utf8')) as ClusterPlan;
}

/** A manifest without its run section (the part that may differ between runs). */
export function manifestBody(dir: string): unknown {
  const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8')) as Record<string, unknown>;
  delete m.run;
  return m;
}

/** A stable order for the same tasks: seeded shuffle (mulberry32 from the test helpers). */
export function shuffled<T>(items: T[], rnd: () => number): T[] {
  const a = [...items];
  for (let i = a.length - 1; i > 0; i--) {
    const j = Math.floor(rnd() * (i + 1));
    [a[i], a[j]] = [a[j]!, a[i]!];
  }
  return a;
}
