/**
 * A PNG decoder for the browser test's screenshots: 8-bit greyscale, RGB or RGBA, not interlaced
 * (what Chromium writes), per the PNG specification (W3C, 2nd edition: chunks, zlib data, the
 * five scanline filters of section 9). Enough to count colours; not a general decoder.
 */
import { inflateSync } from 'node:zlib';

export interface Image {
  width: number;
  height: number;
  /** Bytes per pixel. */
  channels: number;
  pixels: Buffer;
}

const SIGNATURE = Buffer.from([0x89, 0x50, 0x4e, 0x47, 0x0d, 0x0a, 0x1a, 0x0a]);

export function decodePng(file: Buffer): Image {
  if (!file.subarray(0, 8).equals(SIGNATURE)) throw new Error('not a PNG file');
  let at = 8;
  let width = 0;
  let height = 0;
  let channels = 0;
  const data: Buffer[] = [];
  while (at < file.length) {
    const length = file.readUInt32BE(at);
    const type = file.toString('latin1', at + 4, at + 8);
    const body = file.subarray(at + 8, at + 8 + length);
    if (type === 'IHDR') {
      width = body.readUInt32BE(0);
      height = body.readUInt32BE(4);
      const depth = body[8]!;
      const colour = body[9]!;
      const interlace = body[12]!;
      channels = ({ 0: 1, 2: 3, 4: 2, 6: 4 } as Record<number, number>)[colour] ?? 0;
      if (depth !== 8 || channels === 0 || interlace !== 0) throw new Error(`unsupported PNG (depth ${depth}, colour type ${colour}, interlace ${interlace})`);
    } else if (type === 'IDAT') data.push(body);
    else if (type === 'IEND') break;
    at += 12 + length;
  }
  const raw = inflateSync(Buffer.concat(data));
  const stride = width * channels;
  const pixels = Buffer.alloc(stride * height);
  for (let y = 0; y < height; y++) {
    const filter = raw[y * (stride + 1)]!;
    const line = raw.subarray(y * (stride + 1) + 1, (y + 1) * (stride + 1));
    const out = pixels.subarray(y * stride, (y + 1) * stride);
    const prev = y > 0 ? pixels.subarray((y - 1) * stride, y * stride) : null;
    for (let x = 0; x < stride; x++) {
      const a = x >= channels ? out[x - channels]! : 0;
      const b = prev ? prev[x]! : 0;
      const c = prev && x >= channels ? prev[x - channels]! : 0;
      let v = line[x]!;
      if (filter === 1) v += a;
      else if (filter === 2) v += b;
      else if (filter === 3) v += (a + b) >> 1;
      else if (filter === 4) {
        const p = a + b - c;
        const pa = Math.abs(p - a);
        const pb = Math.abs(p - b);
        const pc = Math.abs(p - c);
        v += pa <= pb && pa <= pc ? a : pb <= pc ? b : c;
      } else if (filter !== 0) throw new Error(`bad PNG filter ${filter} on row ${y}`);
      out[x] = v & 0xff;
    }
  }
  return { width, height, channels, pixels };
}

/** Distinct colours (RGB, alpha ignored) and the share of pixels unlike the most common colour (the background). */
export function colourCensus(img: Image): { distinct: number; offBackground: number } {
  const counts = new Map<number, number>();
  const n = img.width * img.height;
  for (let i = 0; i < n; i++) {
    const o = i * img.channels;
    const key = img.channels >= 3 ? (img.pixels[o]! << 16) | (img.pixels[o + 1]! << 8) | img.pixels[o + 2]! : img.pixels[o]!;
    counts.set(key, (counts.get(key) ?? 0) + 1);
  }
  const background = Math.max(...counts.values());
  return { distinct: counts.size, offBackground: (n - background) / n };
}
