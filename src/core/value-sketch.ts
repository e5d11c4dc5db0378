/**
 * The distinct-value sketch a column keeps past the distinct cap: HyperLogLog registers, merged
 * register by register, so sketches of any threads and runs merge. It takes the hash of a value's
 * bytes (hashKey in column-state.ts), whose finaliser, mix32, is here.
 */

/** 2^12 registers: standard error about 1.04 / sqrt(4096) = 1.6 % (Flajolet et al. 2007). */
const SKETCH_BITS = 12;
export const SKETCH_SIZE = 1 << SKETCH_BITS;

/** murmur3's finaliser: the last step of a value's hash, and of its rank bits (updateSketch). */
export function mix32(h: number): number {
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  return h ^ (h >>> 16);
}

/** Register = top 12 bits of the hash; rank = leading zeros of a second finalisation, plus one. */
export function updateSketch(reg: Uint8Array, hash: number): void {
  const j = hash >>> (32 - SKETCH_BITS);
  const rank = Math.clz32(mix32(hash ^ 0x5bd1e995)) + 1;
  if (rank > reg[j]!) reg[j] = rank;
}

/** The number of distinct values the registers estimate. */
export function estimateDistinct(reg: Uint8Array): number {
  let sum = 0;
  let zeros = 0;
  for (let j = 0; j < SKETCH_SIZE; j++) {
    const r = reg[j]!;
    sum += 2 ** -r;
    if (r === 0) zeros++;
  }
  const m = SKETCH_SIZE;
  const alpha = 0.7213 / (1 + 1.079 / m);
  let est = (alpha * m * m) / sum;
  // Small-range correction: linear counting while registers are still empty.
  if (est <= 2.5 * m && zeros > 0) est = m * Math.log(m / zeros);
  return Math.round(est);
}
