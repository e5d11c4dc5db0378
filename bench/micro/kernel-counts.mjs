#!/usr/bin/env node
// What the kernel did during one command: /proc/vmstat counters (page faults, reclaim, dirty pages
// and writeback) before and after, the largest dirty and writeback figures seen (sampled every
// 50 ms), and the command's own counts (GNU time: CPU times, faults; /proc/PID/io: read and write
// calls and bytes). For telling where system time goes; see "Where system time goes at 4 GB" in
// docs/benchmarks.md.
//   node bench/micro/kernel-counts.mjs [--no-sync] -- node dist/cli/main.cjs shuffle FILE --out DIR …
import { spawn, spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { detectTools, measure } from '../lib/measure.mjs';

const dash = process.argv.indexOf('--');
if (dash < 0) {
  console.error('usage: node bench/micro/kernel-counts.mjs [--no-sync] -- COMMAND [ARGS…]');
  process.exit(2);
}
const argv = process.argv.slice(dash + 1);
const sync = !process.argv.slice(2, dash).includes('--no-sync');

const vmstat = () => Object.fromEntries(readFileSync('/proc/vmstat', 'utf8').trim().split('\n').map((l) => l.split(' ')).map(([k, v]) => [k, Number(v)]));
const COUNTERS = [
  'pgfault', 'pgmajfault', 'pgalloc_normal', 'pgfree', 'pgpgin', 'pgpgout',
  'pgscan_kswapd', 'pgscan_direct', 'pgsteal_kswapd', 'pgsteal_direct', 'allocstall_normal',
  'nr_dirtied', 'nr_written', 'workingset_refault_file', 'thp_fault_alloc', 'compact_stall',
];
const tools = detectTools();
const scratch = mkdtempSync(join(tmpdir(), 'rowdeck-kernel-counts-'));
// sync first (as the benchmark does), then the "before" snapshot.
if (sync) spawnSync('sync');
const before = vmstat();
// measure() blocks this thread, so a child samples the dirty and writeback figures.
const sampler = spawn(process.execPath, ['-e', `
    const fs = require('node:fs'); let d = 0, w = 0;
    const t = setInterval(() => { const s = fs.readFileSync('/proc/vmstat', 'utf8');
      d = Math.max(d, +/nr_dirty (\\d+)/.exec(s)[1]); w = Math.max(w, +/nr_writeback (\\d+)/.exec(s)[1]); }, 50);
    process.on('SIGTERM', () => { clearInterval(t); process.stdout.write(JSON.stringify({ d, w })); process.exit(0); });`], { stdio: ['ignore', 'pipe', 'inherit'] });
let sampled = '';
sampler.stdout.on('data', (b) => (sampled += b));
await new Promise((r) => setTimeout(r, 100));
const s = measure(argv, { tools, scratch, sync: false });
const after = vmstat();
sampler.kill('SIGTERM');
await new Promise((r) => sampler.on('exit', r));
rmSync(scratch, { recursive: true, force: true });
const { d, w } = sampled ? JSON.parse(sampled) : { d: null, w: null };

const mb = (x) => (x === null ? 'n/a' : `${(x / 1e6).toFixed(0)} MB`);
console.log(`wall ${s.wallS.toFixed(2)} s, user ${s.userS} s, sys ${s.sysS} s, peak RSS ${s.peakRssMiB?.toFixed(0)} MiB, exit ${s.status}`);
console.log(`faults: ${s.minorFaults} minor, ${s.majorFaults} major`);
console.log(`read calls ${s.readCalls}, write calls ${s.writeCalls} (${mb(s.writeCallBytes)} through them), written ${mb(s.writtenBytes)}, of which dropped before writeback ${mb(s.cancelledBytes)}`);
console.log(`largest while running: nr_dirty ${d === null ? 'n/a' : mb(d * 4096)}, nr_writeback ${w === null ? 'n/a' : mb(w * 4096)}`);
console.log('/proc/vmstat deltas (the whole machine):');
for (const k of COUNTERS) if (k in before) console.log(`  ${k.padEnd(24)} ${after[k] - before[k]}`);
if (!s.ok) {
  console.error(s.error);
  process.exitCode = 1;
}
