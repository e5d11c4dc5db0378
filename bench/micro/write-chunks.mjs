#!/usr/bin/env node
// System time of writing one file into new page-cache pages, by the size of each write: why
// rowdeck writes in pieces of at most 128 KiB (src/io/write-all.ts). Each size writes the same bytes
// into a fresh file, sizes alternated, a warm-up round first; prints min and median per size.
// The file is removed after each write and the next waits --pause seconds: memory a VM's guest
// has freed goes back to its host after a moment, and a pipeline's writes mostly meet such
// memory (without the pause, each write reuses the pages the last one freed).
//   node bench/micro/write-chunks.mjs [--mib 1024] [--rounds 3] [--pause 5] [--dir /tmp] [--sizes 64K,128K,256K,1M,2M]
import { closeSync, openSync, rmSync, writeSync } from 'node:fs';
import { join } from 'node:path';
import { tmpdir } from 'node:os';

const args = process.argv.slice(2);
const opt = (name, dflt) => {
  const i = args.indexOf(`--${name}`);
  return i < 0 ? dflt : args[i + 1];
};
const total = Number(opt('mib', 1024)) * 2 ** 20;
const rounds = Number(opt('rounds', 3));
const pause = Number(opt('pause', 5));
const dir = opt('dir', tmpdir());
const sizes = opt('sizes', '64K,128K,256K,1M,2M')
  .split(',')
  .map((s) => ({ label: s, bytes: Number(s.slice(0, -1)) * (s.endsWith('M') ? 2 ** 20 : 2 ** 10) }));
const source = Buffer.alloc(Math.max(...sizes.map((s) => s.bytes)), 'x,1,2.5\n');
const path = join(dir, `rowdeck-write-chunks-${process.pid}`);

function once(bytes) {
  const before = process.cpuUsage();
  const t = performance.now();
  const fd = openSync(path, 'w');
  for (let at = 0; at < total; at += bytes) writeSync(fd, source, 0, Math.min(bytes, total - at));
  closeSync(fd);
  const wall = (performance.now() - t) / 1000;
  const sys = process.cpuUsage(before).system / 1e6;
  rmSync(path);
  Atomics.wait(new Int32Array(new SharedArrayBuffer(4)), 0, 0, pause * 1000);
  return { wall, sys };
}

const seen = new Map(sizes.map((s) => [s.label, []]));
for (let r = 0; r <= rounds; r++) {
  for (const s of sizes) {
    const x = once(s.bytes);
    if (r > 0) seen.get(s.label).push(x);
  }
}
const median = (xs) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)];
for (const s of sizes) {
  const xs = seen.get(s.label);
  const wall = xs.map((x) => x.wall);
  const sys = xs.map((x) => x.sys);
  console.log(`${s.label.padStart(5)} writes: ${(total / 2 ** 20).toFixed(0)} MiB in ${Math.min(...wall).toFixed(2)} s min, ${median(wall).toFixed(2)} s median (system ${Math.min(...sys).toFixed(2)} / ${median(sys).toFixed(2)} s)`);
}
