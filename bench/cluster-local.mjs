#!/usr/bin/env node
// A plan run as local processes, two at a time: the cluster path's cost against `shuffle` on one
// machine (bench case rowdeck-cluster-4x4). Prints the bytes each stage wrote to the work folder.
//   node bench/cluster-local.mjs INPUT OUT [--tasks 4] [--gather-tasks 4] [--at-once 2] [--threads 1] [--cli dist/cli/main.cjs] [shuffle options...]
import { spawn } from 'node:child_process';
import { readdirSync, statSync } from 'node:fs';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const args = process.argv.slice(2);
const take = (name, dflt) => {
  const i = args.indexOf(`--${name}`);
  if (i < 0) return dflt;
  const v = args[i + 1];
  args.splice(i, 2);
  return v;
};
const tasks = Number(take('tasks', 4));
const gatherTasks = Number(take('gather-tasks', 4));
const atOnce = Number(take('at-once', 2));
const threads = take('threads', '1');
const cli = resolve(take('cli', join(root, 'dist', 'cli', 'main.cjs')));
const [input, out, ...rest] = args;
const work = `${out}.work`;

function run(argv) {
  return new Promise((ok, fail) => {
    const child = spawn(process.execPath, [cli, ...argv], { stdio: ['ignore', 'inherit', 'inherit'] });
    child.on('close', (code) => (code === 0 ? ok() : fail(new Error(`rowdeck ${argv.join(' ')} exited ${code}`))));
  });
}
async function pool(items, width, fn) {
  const queue = [...items];
  await Promise.all(Array.from({ length: width }, async () => {
    for (let i = queue.shift(); i !== undefined; i = queue.shift()) await fn(i);
  }));
}
function bytesUnder(dir) {
  let n = 0;
  for (const e of readdirSync(dir, { withFileTypes: true })) n += e.isDirectory() ? bytesUnder(join(dir, e.name)) : statSync(join(dir, e.name)).size;
  return n;
}

const stageTimes = [];
let t0 = performance.now();
const lap = (name) => { const t = performance.now(); stageTimes.push(`${name} ${((t - t0) / 1000).toFixed(2)} s`); t0 = t; };
await run(['plan', input, '--out', out, '--work', work, '--tasks', String(tasks), '--gather-tasks', String(gatherTasks), '--threads', threads, '--quiet', ...rest]);
lap('plan');
const plan = JSON.parse((await import('node:fs')).readFileSync(join(work, 'plan.json'), 'utf8'));
await pool(plan.scatter.map((_, i) => i), atOnce, (i) => run(['task', work, '--stage', 'scatter', '--index', String(i), '--quiet']));
lap('scatter');
// The last scatter task to end makes the deal step, as under a scheduler.
const scatterBytes = bytesUnder(join(work, 'scatter'));
await pool(plan.gather.map((_, i) => i), atOnce, (i) => run(['task', work, '--stage', 'gather', '--index', String(i), '--quiet']));
lap('gather');
const gatherBytes = bytesUnder(join(work, 'gather'));
await run(['finish', work, '--quiet']);
lap('finish');
const outBytes = bytesUnder(out);
process.stderr.write(`cluster-local: ${plan.scatter.length} scatter and ${plan.gather.length} gather tasks; written: spill ${(scatterBytes / 1e9).toFixed(2)} GB, gather slices ${(gatherBytes / 1e9).toFixed(2)} GB, parts ${(outBytes / 1e9).toFixed(2)} GB; ${stageTimes.join(', ')}\n`);
