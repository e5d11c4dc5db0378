/**
 * A value's bytes as the statistics read them: as little-endian words (hashing, the statistics
 * module's keys), in byte order (min/max, the canonical order of a value table), and as text.
 */

/** Little-endian word of b[i, min(i + 4, e)), zero-padded, byte by byte. */
export function loadWord(b: Uint8Array, i: number, e: number): number {
  let w = b[i]!;
  if (i + 1 < e) w |= b[i + 1]! << 8;
  if (i + 2 < e) w |= b[i + 2]! << 16;
  if (i + 3 < e) w |= b[i + 3]! << 24;
  return w;
}

/**
 * A little-endian word of up to 4 bytes (zero-padded) turned into an int32 whose signed order is
 * the bytes' order: byte-swapped to big-endian, sign bit flipped. Zero padding sorts a shorter
 * value first, as a prefix does; equal keys leave the order to the remaining bytes.
 */
export function orderKey(w: number): number {
  return ((w << 24) | ((w & 0xff00) << 8) | ((w >>> 8) & 0xff00) | (w >>> 24)) ^ 0x80000000;
}

/** orderKey(0): the key of bytes past a value's end. */
export const ORDER_KEY_ZERO = 0x80000000 | 0;

/** Bytes a − b in byte order (like Buffer.compare), without allocating views. */
export function compareBytes(a: Uint8Array, as: number, ae: number, b: Uint8Array, bl: number): number {
  const n = Math.min(ae - as, bl);
  for (let i = 0; i < n; i++) {
    const d = a[as + i]! - b[i]!;
    if (d !== 0) return d;
  }
  return ae - as - bl;
}

/** The first `len` bytes of b as UTF-8 text, or null for len < 0 (no value). */
export function decodeUtf8(b: Uint8Array, len: number): string | null {
  return len < 0 ? null : Buffer.from(b.buffer, b.byteOffset, len).toString('utf8');
}
