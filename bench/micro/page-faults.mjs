#!/usr/bin/env node
// What a page of memory costs the first time it is written, against the second time: a kernel
// page fault each (and zeroing). On the benchmark machine, a virtual machine, the first touch
// cost ~11-12 us a 4 KiB page, a hundred times what bare Linux is commonly said to take (from
// memory), which is why stage 1 no longer spreads a quarter of the budget over its buffers
// (src/engine/shuffle.ts, BUFFER_CAP).
//   node bench/micro/page-faults.mjs [--mib 256] [--rounds 3]
import { arg } from './options.mjs';

const mib = Number(arg('mib', 256));
const rounds = Number(arg('rounds', 3));
const pages = (mib << 20) / 4096;
const touch = (u8, v) => {
  const t = performance.now();
  for (let i = 0; i < u8.length; i += 4096) u8[i] = v;
  return ((performance.now() - t) * 1000) / pages;
};
for (let r = 0; r < rounds; r++) {
  const wasm = new Uint8Array(new WebAssembly.Memory({ initial: (mib << 20) / 65536 }).buffer);
  const first = touch(wasm, 1);
  const again = touch(wasm, 2);
  const plain = touch(new Uint8Array(new ArrayBuffer(mib << 20)), 1);
  console.log(`${mib} MiB: first write ${first.toFixed(2)} us a page (WebAssembly memory), ${plain.toFixed(2)} us (ArrayBuffer); second write ${again.toFixed(3)} us`);
}
