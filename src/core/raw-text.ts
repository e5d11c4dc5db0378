/**
 * Text from bytes that may not be valid UTF-8, without losing any byte: valid sequences decode as
 * usual, and each byte of an invalid one becomes a lone surrogate U+DC80..U+DCFF (the scheme of
 * Python's "surrogateescape" error handler, PEP 383). Valid UTF-8 never decodes to a lone
 * surrogate, so two different byte strings always give two different texts, and
 * `encodeLossless` gives the bytes back. JSON keeps lone surrogates as `\udcXX` escapes.
 *
 * Used where data values are shown or stored as text (class values in the manifest and in
 * messages): decoding with U+FFFD instead made different invalid values look alike.
 */
import { isUtf8 } from 'node:buffer';

/** Length of the valid UTF-8 sequence at `i` (RFC 3629, table 3-7 of Unicode), or 0 if it is not one. */
function sequenceLength(b: Uint8Array, i: number): number {
  const c = b[i]!;
  const at = (k: number, lo = 0x80, hi = 0xbf): boolean => i + k < b.length && b[i + k]! >= lo && b[i + k]! <= hi;
  if (c < 0x80) return 1;
  if (c >= 0xc2 && c <= 0xdf) return at(1) ? 2 : 0;
  if (c === 0xe0) return at(1, 0xa0) && at(2) ? 3 : 0;
  if ((c >= 0xe1 && c <= 0xec) || c === 0xee || c === 0xef) return at(1) && at(2) ? 3 : 0;
  if (c === 0xed) return at(1, 0x80, 0x9f) && at(2) ? 3 : 0;
  if (c === 0xf0) return at(1, 0x90) && at(2) && at(3) ? 4 : 0;
  if (c >= 0xf1 && c <= 0xf3) return at(1) && at(2) && at(3) ? 4 : 0;
  if (c === 0xf4) return at(1, 0x80, 0x8f) && at(2) && at(3) ? 4 : 0;
  return 0;
}

/** The text of `bytes`: UTF-8, with each byte of an invalid sequence as U+DC00 + the byte. */
export function decodeLossless(bytes: Uint8Array): string {
  if (isUtf8(bytes)) return Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength).toString('utf8');
  let out = '';
  let run = 0; // start of the current run of valid bytes
  let i = 0;
  const flush = (end: number): void => {
    if (end > run) out += Buffer.from(bytes.buffer, bytes.byteOffset + run, end - run).toString('utf8');
  };
  while (i < bytes.length) {
    const n = sequenceLength(bytes, i);
    if (n > 0) {
      i += n;
      continue;
    }
    flush(i);
    out += String.fromCharCode(0xdc00 + bytes[i]!);
    i++;
    run = i;
  }
  flush(i);
  return out;
}

/** The bytes `decodeLossless` read `text` from: UTF-8, with U+DC80..U+DCFF (alone) back as single bytes. */
export function encodeLossless(text: string): Buffer {
  if (!/[\udc80-\udcff]/.test(text)) return Buffer.from(text, 'utf8');
  const parts: Buffer[] = [];
  let run = 0;
  for (let i = 0; i < text.length; i++) {
    const u = text.charCodeAt(i);
    if (u >= 0xd800 && u <= 0xdbff && i + 1 < text.length) {
      const v = text.charCodeAt(i + 1);
      if (v >= 0xdc00 && v <= 0xdfff) {
        i++; // a pair: an ordinary character
        continue;
      }
    }
    if (u >= 0xdc80 && u <= 0xdcff) {
      parts.push(Buffer.from(text.slice(run, i), 'utf8'), Buffer.of(u - 0xdc00));
      run = i + 1;
    }
  }
  parts.push(Buffer.from(text.slice(run), 'utf8'));
  return Buffer.concat(parts);
}
