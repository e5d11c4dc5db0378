#!/usr/bin/env node
// Stage 2's key-order copy in miniature: copy 92-byte records in random order out of a region
// of a given size (with copyWithin, as gatherBucket does), and print ns a record per region size.
// Where the time jumps is the bucket size to stay under (see chooseBuckets in src/engine/shuffle.ts).
//   node bench/micro/random-copy.mjs
const L = 92;
for (const size of [256 << 10, 512 << 10, 1 << 20, 2 << 20, 4 << 20, 8 << 20]) {
  const bytes = new Uint8Array(size * 2 + 4096).fill(3);
  const n = Math.floor(size / 96);
  const at = new Uint32Array(n);
  for (let i = 0; i < n; i++) at[i] = i * 96;
  for (let i = n - 1; i > 0; i--) {
    const j = Math.floor(Math.random() * (i + 1));
    const t = at[i];
    at[i] = at[j];
    at[j] = t;
  }
  let best = Infinity;
  for (let r = 0; r < Math.max(3, (64 << 20) / size); r++) {
    const t0 = performance.now();
    let out = size;
    for (let i = 0; i < n; i++) {
      bytes.copyWithin(out, at[i], at[i] + L);
      out += L;
    }
    best = Math.min(best, ((performance.now() - t0) / n) * 1e6);
  }
  console.log(`${String(size >> 10).padStart(5)} KiB region: ${best.toFixed(0)} ns a record`);
}
