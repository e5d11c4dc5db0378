/**
 * Keyed 64-bit hashing, as two 32-bit lanes (hi, lo), in plain 32-bit integer arithmetic so it
 * costs no BigInt and gives the same bits on every platform.
 *
 * Every record's shuffle key is `hash(secret, identity)`. The secret comes from the user's seed
 * text through seedrandom (ARC4), so any text is a valid seed. The mixing is MurmurHash3's
 * 32-bit body and finaliser, run twice with different lane seeds; the finaliser's avalanche is
 * what makes low-entropy identities (input 0, offsets 0, 41, 87, …) spread uniformly.
 */
import seedrandom from 'seedrandom';
import { LITTLE_ENDIAN } from './platform.js';

const C1 = 0xcc9e2d51;
const C2 = 0x1b873593;

export type Secret = Uint32Array;

/** Derives the 128-bit hash secret from seed text. Same text, same secret, on every machine. */
export function deriveSecret(seed: string): Secret {
  const rng = seedrandom(seed);
  const s = new Uint32Array(4);
  for (let i = 0; i < 4; i++) s[i] = rng.int32() >>> 0;
  return s;
}

/** A fixed secret for fingerprints, which must not depend on the seed (input and output are compared). */
export const FINGERPRINT_SECRET: Secret = Uint32Array.of(0x9e3779b9, 0x7f4a7c15, 0x85ebca6b, 0xc2b2ae35);

function mixWord(h: number, k: number): number {
  k = Math.imul(k, C1);
  k = (k << 15) | (k >>> 17);
  k = Math.imul(k, C2);
  h ^= k;
  h = (h << 13) | (h >>> 19);
  return (Math.imul(h, 5) + 0xe6546b64) | 0;
}

function finish(h: number, len: number): number {
  h ^= len;
  h ^= h >>> 16;
  h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13;
  h = Math.imul(h, 0xc2b2ae35);
  h ^= h >>> 16;
  return h >>> 0;
}

/** Output slot for the two lanes, reused to avoid allocating per record. */
export const hashOut = new Uint32Array(2);

/**
 * Hashes three 32-bit words (e.g. input ordinal, offset high, offset low) into `out[0]` (hi) and
 * `out[1]` (lo).
 */
export function hashWords3(secret: Secret, a: number, b: number, c: number, out: Uint32Array = hashOut): Uint32Array {
  let h1 = secret[0]! | 0;
  let h2 = secret[1]! | 0;
  h1 = mixWord(h1, a ^ secret[2]!);
  h2 = mixWord(h2, a ^ secret[3]!);
  h1 = mixWord(h1, b);
  h2 = mixWord(h2, b);
  h1 = mixWord(h1, c);
  h2 = mixWord(h2, c);
  h1 = finish(h1, 12);
  h2 = finish(h2, 12);
  // Cross the lanes so a weakness in one does not survive into the 64-bit value.
  out[0] = (h1 ^ Math.imul(h2, 0x2545f491)) >>> 0;
  out[1] = (h2 ^ Math.imul(h1, 0x9e3779b1)) >>> 0;
  return out;
}

/** Hashes bytes `buf[start, end)` into `out[0]` (hi) and `out[1]` (lo). */
export function hashBytes(secret: Secret, buf: Uint8Array, start: number, end: number, out: Uint32Array = hashOut): Uint32Array {
  let h1 = secret[0]! ^ secret[2]!;
  let h2 = secret[1]! ^ secret[3]!;
  let i = start;
  const stop = end - 3;
  for (; i < stop; i += 4) {
    const k = buf[i]! | (buf[i + 1]! << 8) | (buf[i + 2]! << 16) | (buf[i + 3]! << 24);
    h1 = mixWord(h1, k);
    h2 = mixWord(h2, k ^ 0x5bd1e995);
  }
  let k = 0;
  switch (end - i) {
    case 3:
      k ^= buf[i + 2]! << 16;
    // falls through
    case 2:
      k ^= buf[i + 1]! << 8;
    // falls through
    case 1:
      k ^= buf[i]!;
      h1 = mixWord(h1, k);
      h2 = mixWord(h2, k ^ 0x5bd1e995);
  }
  const len = end - start;
  h1 = finish(h1, len);
  h2 = finish(h2, len);
  out[0] = (h1 ^ Math.imul(h2, 0x2545f491)) >>> 0;
  out[1] = (h2 ^ Math.imul(h1, 0x9e3779b1)) >>> 0;
  return out;
}

/**
 * Order-independent multiset fingerprint: the sum, modulo 2^64, of the 64-bit hashes of the
 * records' bytes. Sums commute, so partial fingerprints from any number of workers or files add
 * up to the same value. Rendered as 16 hex digits.
 */
export class Fingerprint {
  hi = 0;
  lo = 0;
  count = 0;

  addBytes(buf: Uint8Array, start: number, end: number): void {
    const h = fingerprintBytes(buf, start, end);
    this.addHash(h[0]!, h[1]!);
  }

  /** Adds a record stored word-aligned and zero-padded (see `fingerprintAligned`). */
  addAligned(u32: Uint32Array, word: number, len: number): void {
    const h = fingerprintAligned(u32, word, len);
    this.addHash(h[0]!, h[1]!);
  }

  addHash(hi: number, lo: number): void {
    let l = this.lo + lo;
    let carry = 0;
    if (l >= 0x100000000) {
      l -= 0x100000000;
      carry = 1;
    }
    this.lo = l;
    this.hi = (this.hi + hi + carry) >>> 0;
    this.count++;
  }

  merge(other: { hi: number; lo: number; count: number }): void {
    const c = this.count;
    this.addHash(other.hi, other.lo);
    this.count = c + other.count;
  }

  toHex(): string {
    return this.hi.toString(16).padStart(8, '0') + this.lo.toString(16).padStart(8, '0');
  }

  toJSON(): { hi: number; lo: number; count: number } {
    return { hi: this.hi, lo: this.lo, count: this.count };
  }
}

/** Uniform double in [0, 1) from a 64-bit hash (53 bits used). */
export function hashToUnit(hi: number, lo: number): number {
  return (hi * 0x200000 + (lo >>> 11)) / 2 ** 53;
}

/**
 * Same value as `hashBytes(secret, bytes, 4 * word, 4 * word + len)`, read through a 32-bit view
 * of a buffer where the record starts on a 4-byte boundary and the bytes after `len` up to the
 * next boundary are zero (the spill layout). One load per word instead of four.
 */
export function hashAlignedWords(secret: Secret, u32: Uint32Array, word: number, len: number, out: Uint32Array = hashOut): Uint32Array {
  let h1 = secret[0]! ^ secret[2]!;
  let h2 = secret[1]! ^ secret[3]!;
  const words = (len + 3) >>> 2;
  const stop = word + words;
  for (let w = word; w < stop; w++) {
    const k = u32[w]! | 0;
    h1 = mixWord(h1, k);
    h2 = mixWord(h2, k ^ 0x5bd1e995);
  }
  h1 = finish(h1, len);
  h2 = finish(h2, len);
  out[0] = (h1 ^ Math.imul(h2, 0x2545f491)) >>> 0;
  out[1] = (h2 ^ Math.imul(h1, 0x9e3779b1)) >>> 0;
  return out;
}

/*
 * Record hashes for fingerprints. They run over every byte of every record twice per run, so
 * they use a lighter per-word step than the keyed hash (a multiply and a shift per lane, both
 * lanes seeing every word), then MurmurHash3's finaliser on each lane and a cross of the lanes.
 * Each step is a bijection of the lane state, so records that differ in one word always give
 * different lane states; the sum over records is what detects loss, duplication or change.
 */
const FP_C1 = 0x9e3779b1;
const FP_C2 = 0x85ebca77;

function fingerprintFinish(h1: number, h2: number, len: number, out: Uint32Array): Uint32Array {
  h1 = finish(h1 ^ FINGERPRINT_SECRET[0]!, len);
  h2 = finish(h2 ^ FINGERPRINT_SECRET[1]!, len);
  out[0] = (h1 ^ Math.imul(h2, 0x2545f491)) >>> 0;
  out[1] = (h2 ^ Math.imul(h1, 0x9e3779b1)) >>> 0;
  return out;
}

/** A DataView over the last buffer `fingerprintBytes` read whole words from (callers pass the same batch buffer record after record). */
let wordView: DataView<ArrayBufferLike> | null = null;
let wordViewOf: Uint8Array | null = null;

/** Fingerprint hash of bytes `buf[start, end)`; equal to `fingerprintAligned` on the same bytes. */
export function fingerprintBytes(buf: Uint8Array, start: number, end: number, out: Uint32Array = hashOut): Uint32Array {
  let h1 = FINGERPRINT_SECRET[2]! | 0;
  let h2 = FINGERPRINT_SECRET[3]! | 0;
  let i = start;
  const stop = end - 3;
  if (stop - i >= 16) {
    // Whole words with one little-endian load each (the same words as the byte loop below).
    if (buf !== wordViewOf) {
      wordView = new DataView(buf.buffer, buf.byteOffset, buf.byteLength);
      wordViewOf = buf;
    }
    const dv = wordView!;
    for (; i < stop; i += 4) {
      const k = dv.getInt32(i, true);
      h1 = Math.imul(h1 ^ k, FP_C1);
      h1 ^= h1 >>> 15;
      h2 = Math.imul(h2 + k, FP_C2);
      h2 = (h2 << 13) | (h2 >>> 19);
    }
  }
  for (; i < stop; i += 4) {
    const k = buf[i]! | (buf[i + 1]! << 8) | (buf[i + 2]! << 16) | (buf[i + 3]! << 24);
    h1 = Math.imul(h1 ^ k, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
  }
  if (i < end) {
    let k = buf[i]!;
    if (i + 1 < end) k |= buf[i + 1]! << 8;
    if (i + 2 < end) k |= buf[i + 2]! << 16;
    h1 = Math.imul(h1 ^ k, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
  }
  return fingerprintFinish(h1, h2, end - start, out);
}

/** Fingerprint hash of a record stored word-aligned with zero padding after `len` bytes. */
export function fingerprintAligned(u32: Uint32Array, word: number, len: number, out: Uint32Array = hashOut): Uint32Array {
  // A big-endian machine reads the bytes themselves (slower, same value).
  if (!LITTLE_ENDIAN) return fingerprintBytes(new Uint8Array(u32.buffer, u32.byteOffset + 4 * word, len), 0, len, out);
  let h1 = FINGERPRINT_SECRET[2]! | 0;
  let h2 = FINGERPRINT_SECRET[3]! | 0;
  const stop = word + ((len + 3) >>> 2);
  let w = word;
  // Four words per turn: the compiled loop re-checks the array (map, bounds, index overflow,
  // stack) on every turn, ~25 instructions a word for ~9 of hashing. Counted under valgrind:
  // 909 -> 797 instructions for a 93-byte record. Same steps, same order, same value.
  for (const stop4 = stop - 3; w < stop4; w += 4) {
    const k0 = u32[w]! | 0;
    const k1 = u32[w + 1]! | 0;
    const k2 = u32[w + 2]! | 0;
    const k3 = u32[w + 3]! | 0;
    h1 = Math.imul(h1 ^ k0, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k0, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
    h1 = Math.imul(h1 ^ k1, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k1, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
    h1 = Math.imul(h1 ^ k2, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k2, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
    h1 = Math.imul(h1 ^ k3, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k3, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
  }
  for (; w < stop; w++) {
    const k = u32[w]! | 0;
    h1 = Math.imul(h1 ^ k, FP_C1);
    h1 ^= h1 >>> 15;
    h2 = Math.imul(h2 + k, FP_C2);
    h2 = (h2 << 13) | (h2 >>> 19);
  }
  return fingerprintFinish(h1, h2, len, out);
}
