/**
 * Text from bytes that may not be UTF-8, without merging different values. The expected texts are
 * Python 3.11's `bytes.decode('utf-8', 'surrogateescape')` (PEP 383), computed once and written
 * here; the valid/invalid sequences follow RFC 3629 section 4 (overlong forms, encoded surrogates
 * and code points above U+10FFFF are invalid).
 */
import { describe, expect, it } from 'vitest';
import { decodeLossless, encodeLossless } from '../src/core/raw-text.js';
import { createRandom } from './helpers/engine.js';

// Python 3.11: bytes.fromhex(h).decode('utf-8', 'surrogateescape')
const VECTORS: [string, string][] = [
  ['61ff', 'a\udcff'],
  ['61fe', 'a\udcfe'],
  ['c3a974c3a9', '\u00e9t\u00e9'],
  ['c3', '\udcc3'],
  ['e282', '\udce2\udc82'],
  ['e282ac', '\u20ac'],
  ['eda080', '\udced\udca0\udc80'], // an encoded surrogate (RFC 3629: invalid)
  ['f09f9880', '\u{1f600}'],
  ['f4908080', '\udcf4\udc90\udc80\udc80'], // above U+10FFFF
  ['c0af', '\udcc0\udcaf'], // overlong
  ['e080af', '\udce0\udc80\udcaf'], // overlong
  ['788079', 'x\udc80y'],
  ['f09f98', '\udcf0\udc9f\udc98'], // cut short
];

describe('decodeLossless / encodeLossless', () => {
  it.each(VECTORS)('%s decodes as Python surrogateescape does, and encodes back', (hex, text) => {
    const bytes = Buffer.from(hex, 'hex');
    expect(decodeLossless(bytes)).toBe(text);
    expect(encodeLossless(text).equals(bytes)).toBe(true);
  });

  it('two different invalid values stay different (U+FFFD replacement made them equal)', () => {
    const a = Buffer.from('61ff', 'hex');
    const b = Buffer.from('61fe', 'hex');
    expect(a.toString('utf8')).toBe(b.toString('utf8')); // the loss this module avoids
    expect(decodeLossless(a)).not.toBe(decodeLossless(b));
    // And through JSON (the manifest), as \udcXX escapes.
    expect(JSON.parse(JSON.stringify(decodeLossless(a)))).toBe('a\udcff');
  });

  it('valid UTF-8 decodes exactly as Buffer.toString does, and random bytes round-trip', () => {
    const rnd = createRandom(11);
    for (let t = 0; t < 2000; t++) {
      const n = Math.floor(rnd() * 12);
      const bytes = Buffer.alloc(n);
      // Mostly high bytes, so invalid and valid multi-byte sequences both occur.
      for (let i = 0; i < n; i++) bytes[i] = rnd() < 0.3 ? Math.floor(rnd() * 128) : 0x80 + Math.floor(rnd() * 128);
      const text = decodeLossless(bytes);
      expect(encodeLossless(text).equals(bytes)).toBe(true);
      const valid = Buffer.from(bytes.toString('utf8'), 'utf8').equals(bytes);
      if (valid) expect(text).toBe(bytes.toString('utf8'));
    }
    for (const s of ['plain', 'déjà vu', '\u{1f600} ok', '']) expect(decodeLossless(Buffer.from(s, 'utf8'))).toBe(s);
  });
});
