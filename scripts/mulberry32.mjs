// mulberry32: a small seeded generator for invented data (benchmark files, the example, tests).
// Not the engine's randomness: shuffles are keyed by src/core/hash.ts.

/** A function returning numbers in [0, 1), the same sequence for the same 32-bit seed. */
export function createRandom(seed) {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}
