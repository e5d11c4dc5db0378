#!/usr/bin/env node
// Peak disk use of one shuffle: the file system's used bytes, sampled every --every ms while the
// run goes, less what was used when it started. Spill files and parts share the disk (unless
// --temp-dir puts the spill elsewhere), so this is what a run needs free.
//   node bench/micro/disk-peak.mjs [--file bench/data/readings-1g.csv] [--every 20] [--cli dist/cli/main.cjs] [-- more shuffle options]
// Other writers on the same file system show up in the figure: run it on a quiet machine.
import { spawn } from 'node:child_process';
import { rmSync, statfsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { arg } from './options.mjs';

const file = arg('file', 'bench/data/readings-1g.csv');
const every = Number(arg('every', 20));
const cli = arg('cli', 'dist/cli/main.cjs');
const dash = process.argv.indexOf('--');
const extra = dash > 0 ? process.argv.slice(dash + 1) : ['--stratify', 'fault'];
const out = join(tmpdir(), `rowdeck-disk-peak-${process.pid}`);

const used = () => {
  const s = statfsSync(dirname(out));
  return (s.blocks - s.bfree) * s.bsize;
};
const base = used();
let peak = base;
const t0 = process.hrtime.bigint();
const child = spawn(process.execPath, [cli, 'shuffle', file, '--out', out, '--partitions', '8', '--seed', 'disk', '--quiet', ...extra], { stdio: 'inherit' });
const timer = setInterval(() => (peak = Math.max(peak, used())), every);
const code = await new Promise((res) => child.on('exit', res));
clearInterval(timer);
const secs = Number(process.hrtime.bigint() - t0) / 1e9;
const after = used();
rmSync(out, { recursive: true, force: true });
if (code !== 0) process.exit(code ?? 1);
const mib = (b) => (b / 2 ** 20).toFixed(0);
console.log(`${file}: peak ${mib(peak - base)} MiB over the start, ${mib(after - base)} MiB at the end (the parts), ${secs.toFixed(2)} s`);
