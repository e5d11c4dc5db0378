/**
 * Input adapters: format from the name, gzip recognised by its magic bytes (RFC 1952 §2.3.1, from memory:
 * ID1 = 0x1f, ID2 = 0x8b) whatever the name, any Readable as a source (as stdin is), and several
 * inputs read in order with their headers checked against the first.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, rmSync, truncateSync, writeFileSync } from 'node:fs';
import { execFileSync, spawn } from 'node:child_process';
import { open, type FileHandle } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { gzipSync } from 'node:zlib';
import { chunksInTurn, detectFormat, INLINE_MAX_BYTES, inlineMaxBytes, openInput, readRecords, ReadAhead, READ_AHEAD_MAX_BYTES, smallInputs } from '../src/io/input.js';
import { RecordReader, type RecordReaderOptions } from '../src/io/reader.js';
import { fieldText } from '../src/core/record-batch.js';
import type { RecordBatch } from '../src/io/batch.js';

let dir = '';
const csvA = 'sensor_id,fault\nS1,none\nS2,"drift, slow"\n';
const csvB = 'sensor_id,fault\nS3,spike\n';

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-input-'));
  writeFileSync(join(dir, 'a.csv'), csvA);
  writeFileSync(join(dir, 'b.csv.gz'), gzipSync(csvB));
  writeFileSync(join(dir, 'hidden-gzip.csv'), gzipSync(csvB)); // gzip without a .gz name
  writeFileSync(join(dir, 'other.csv'), 'sensor_id,class\nS9,none\n');
  writeFileSync(join(dir, 'broken.csv.gz'), gzipSync(csvA).subarray(0, 20));
  writeFileSync(join(dir, 'r.ndjson'), '{"sensor_id":"S1","fault":"none"}\n');
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

async function collectBytes(src: AsyncIterable<Buffer>): Promise<string> {
  const parts: Buffer[] = [];
  for await (const c of src) parts.push(c);
  return Buffer.concat(parts).toString('utf8');
}

async function readValues(paths: string[]): Promise<{ input: number; value: string | null }[]> {
  const out: { input: number; value: string | null }[] = [];
  for await (const { input, batch } of readRecords(paths, { header: true, wanted: ['fault'], onBadRecord: 'fail' })) {
    for (let i = 0; i < batch.count; i++) out.push({ input, value: fieldText(batch, i, 0) });
  }
  return out;
}

describe('which inputs are done on the calling thread by default', () => {
  it('is under 192 MiB on two cores or fewer without statistics, else 32 MiB (the measured crossovers are in input.ts)', () => {
    expect([1, 2].map((c) => inlineMaxBytes(c))).toEqual([192 << 20, 192 << 20]);
    expect([1, 2].map((c) => inlineMaxBytes(c, true))).toEqual([INLINE_MAX_BYTES, INLINE_MAX_BYTES]);
    expect([3, 4, 64].map((c) => inlineMaxBytes(c))).toEqual([INLINE_MAX_BYTES, INLINE_MAX_BYTES, INLINE_MAX_BYTES]);
    expect(INLINE_MAX_BYTES).toBe(32 << 20);
  });

  it('counts all inputs together, by their size on disk (sparse files of 60 and 100 MiB)', () => {
    const d = mkdtempSync(join(tmpdir(), 'rowdeck-inline-'));
    try {
      const a = join(d, 'a.csv');
      const b = join(d, 'b.csv');
      writeFileSync(a, '');
      writeFileSync(b, '');
      truncateSync(a, 60 << 20);
      truncateSync(b, 100 << 20);
      expect(smallInputs([a], false, 2)).toBe(true);
      expect(smallInputs([a, b], false, 2)).toBe(true); // 160 MiB
      expect(smallInputs([a, b, b], false, 2)).toBe(false); // 260 MiB
      expect(smallInputs([a], true, 2)).toBe(false);
      expect(smallInputs([a], false, 8)).toBe(false);
      expect(smallInputs([join(d, 'missing.csv')], false, 2)).toBe(false);
    } finally {
      rmSync(d, { recursive: true, force: true });
    }
  });
});

describe('detectFormat', () => {
  it('from the name, .gz allowed, explicit wins, unknown is a usage error', () => {
    expect(detectFormat('x.csv')).toBe('csv');
    expect(detectFormat('X.TSV.gz')).toBe('tsv');
    expect(detectFormat('x.ndjson')).toBe('jsonl');
    expect(detectFormat('x.jsonl.gz')).toBe('jsonl');
    expect(detectFormat('x.txt', 'tsv')).toBe('tsv');
    expect(detectFormat('-')).toBe('csv');
    expect(() => detectFormat('x.txt')).toThrow(expect.objectContaining({ code: 'RDK_OPTION' }));
  });
});

describe('openInput', () => {
  it('decompresses gzip by magic bytes, with or without a .gz name', async () => {
    expect(await collectBytes(openInput(join(dir, 'b.csv.gz')))).toBe(csvB);
    expect(await collectBytes(openInput(join(dir, 'hidden-gzip.csv')))).toBe(csvB);
    expect(await collectBytes(openInput(join(dir, 'a.csv')))).toBe(csvA);
  });
  it('reads any Readable (as for stdin), even one that delivers a byte at a time', async () => {
    const gz = gzipSync(csvA);
    const oneByte = Readable.from((function* () { for (const b of gz) yield Buffer.from([b]); })());
    expect(await collectBytes(openInput(oneByte))).toBe(csvA);
    expect(await collectBytes(openInput(Readable.from([Buffer.from('x')])))).toBe('x');
    expect(await collectBytes(openInput(Readable.from([])))).toBe('');
  });
  it('a missing file is RDK_INPUT_NOT_FOUND, damaged gzip is RDK_IO', async () => {
    await expect(collectBytes(openInput(join(dir, 'nope.csv')))).rejects.toMatchObject({ code: 'RDK_INPUT_NOT_FOUND' });
    await expect(collectBytes(openInput(join(dir, 'broken.csv.gz')))).rejects.toMatchObject({ code: 'RDK_IO' });
  });
});

describe('readRecords', () => {
  it('reads several inputs in order, plain and gzip, with matching headers', async () => {
    expect(await readValues([join(dir, 'a.csv'), join(dir, 'b.csv.gz'), join(dir, 'hidden-gzip.csv')])).toEqual([
      { input: 0, value: 'none' },
      { input: 0, value: 'drift, slow' },
      { input: 1, value: 'spike' },
      { input: 2, value: 'spike' },
    ]);
  });
  it('a second input with other columns is RDK_HEADER_MISMATCH naming both files', async () => {
    const err = await readValues([join(dir, 'a.csv'), join(dir, 'other.csv')]).catch((e: unknown) => e);
    expect(err).toMatchObject({ code: 'RDK_HEADER_MISMATCH' });
    const msg = (err as Error).message;
    expect(msg).toContain(join(dir, 'other.csv'));
    expect(msg).toContain(join(dir, 'a.csv'));
  });
  it('JSON Lines inputs by extension', async () => {
    expect(await readValues([join(dir, 'r.ndjson')])).toEqual([{ input: 0, value: 'none' }]);
  });
});

describe('ReadAhead', () => {
  it('gives small plain files whole, and null for gzip, large, missing, stdin and pipes', async () => {
    const big = join(dir, 'big.csv');
    writeFileSync(big, 'sensor_id,fault\n' + 'S1,none\n'.repeat(READ_AHEAD_MAX_BYTES / 8));
    const fifo = join(dir, 'pipe.csv');
    execFileSync('mkfifo', [fifo]); // no writer: opening it would wait for one
    const paths = [join(dir, 'a.csv'), join(dir, 'b.csv.gz'), join(dir, 'hidden-gzip.csv'), big, join(dir, 'missing.csv'), '-', fifo, join(dir, 'other.csv')];
    const small = new ReadAhead(paths, 4 << 20);
    const got = [];
    for (let k = 0; k < paths.length; k++) got.push(await small.take(k));
    expect(got[0]!.equals(readFileSync(paths[0]!))).toBe(true);
    expect(got.slice(1, 7)).toEqual([null, null, null, null, null, null]);
    expect(got[7]!.toString()).toBe('sensor_id,class\nS9,none\n');
    // Under two blocks only: a file parsed in blocks is left to the blocks.
    const tiny = new ReadAhead([paths[0]!, paths[7]!], 16);
    expect(await tiny.take(0)).toBeNull();
    // One input alone is read as before.
    expect(await new ReadAhead([paths[0]!], 4 << 20).take(0)).toBeNull();
  });
});

describe('RecordReader recycle', () => {
  /** Every record's fields as text, from pushes of `chunk` bytes. */
  const records = (r: RecordReader, text: string, chunk: number): (string | null)[][] => {
    const out: (string | null)[][] = [];
    const take = (b: RecordBatch | null): void => {
      for (let i = 0; b && i < b.count; i++) out.push(Array.from({ length: b.wanted }, (_, w) => fieldText(b, i, w)));
    };
    const bytes = Buffer.from(text);
    for (let at = 0; at < bytes.length; at += chunk) take(r.push(bytes.subarray(at, at + chunk)));
    take(r.end());
    return out;
  };
  it('a reader that takes a finished one\'s arrays reads what a new one reads', () => {
    // Quoted fields with delimiters and line breaks inside (RFC 4180 section 2, rules 5-7).
    const a = 'id,name,note\n' + Array.from({ length: 3000 }, (_, i) => `${i},n${i % 7},"x, ""${i}""\ny"`).join('\n') + '\n';
    const b = 'id,name,note\n' + Array.from({ length: 500 }, (_, i) => `${i * 3},m${i},plain`).join('\n') + '\n';
    const opts = (wanted: string[]): RecordReaderOptions => ({ format: 'csv', header: true, wanted, file: 'test', onBadRecord: 'fail' });
    const first = new RecordReader(opts(['note', 'id']));
    const fromA = records(first, a, 4096);
    expect(fromA.length).toBe(3000);
    const second = new RecordReader(opts(['id', 'name']), first);
    expect(records(second, b, 1000)).toEqual(records(new RecordReader(opts(['id', 'name'])), b, 1000));
    // Another count of wanted fields: nothing is taken, and the reader is as good as new.
    const third = new RecordReader(opts(['name']), second);
    expect(records(third, a, 777)).toEqual(records(new RecordReader(opts(['name'])), a, 777));
  });
});


describe('chunksInTurn', () => {
  /** Each chunk copied (the buffers are used again), and the buffer it came in. */
  const chunksOf = async (path: string, position: number | null): Promise<{ bytes: Buffer; store: ArrayBufferLike }[]> => {
    const fh = await open(path, 'r');
    try {
      const out: { bytes: Buffer; store: ArrayBufferLike }[] = [];
      for await (const c of chunksInTurn(fh, path, position)) out.push({ bytes: Buffer.from(c), store: c.buffer });
      return out;
    } finally {
      await fh.close();
    }
  };

  it('a file from an offset: its bytes, through three buffers used in turn (no fresh buffer a read)', async () => {
    const path = join(dir, 'turns.csv');
    const text = Buffer.from(Array.from({ length: 500_000 }, (_, i) => `S${i},${i % 7}\n`).join(''));
    expect(text.length).toBeGreaterThan(4 * (1 << 20));
    writeFileSync(path, text);
    const from = 12_345;
    const chunks = await chunksOf(path, from);
    expect(Buffer.concat(chunks.map((c) => c.bytes)).equals(text.subarray(from))).toBe(true);
    expect(chunks.length).toBeGreaterThanOrEqual(5);
    // Chunk k and chunk k + 3 share one buffer; k, k + 1 and k + 2 do not (a read stream
    // allocates a buffer a read; two buffers would overwrite chunk k while k + 1 is in use).
    const stores = chunks.map((c) => c.store);
    expect(new Set(stores).size).toBe(3);
    for (let k = 0; k + 3 < stores.length; k++) {
      expect(stores[k + 3]).toBe(stores[k]);
      expect(new Set(stores.slice(k, k + 3)).size).toBe(3);
    }
  });

  it('reads the next chunk while the caller uses this one, and a caller that stops early leaves no read under way', async () => {
    // A file handle that logs its reads and answers each on a later turn, as libuv does.
    const log: string[] = [];
    const total = 5 * 1000;
    const fh = {
      stat: async () => ({ isFile: () => true, size: total }),
      read: (buf: Buffer, _off: number, length: number, pos: number) => {
        log.push(`read ${pos}`);
        return new Promise((resolve) =>
          setTimeout(() => {
            const n = Math.max(0, Math.min(length, 1000, total - pos));
            buf.fill(pos / 1000, 0, n);
            log.push(`done ${pos}`);
            resolve({ bytesRead: n, buffer: buf });
          }, 2),
        );
      },
    } as unknown as FileHandle;
    const seen: string[] = [];
    for await (const c of chunksInTurn(fh, 'stub', 0)) {
      seen.push(`chunk ${c[0]! * 1000}`);
      // When a chunk reaches the caller, the read of the next one is already asked for.
      expect(log[log.length - 1]).toBe(`read ${c[0]! * 1000 + c.length}`);
      log.push(`got ${c[0]! * 1000}`);
    }
    expect(seen).toEqual(['chunk 0', 'chunk 1000', 'chunk 2000', 'chunk 3000', 'chunk 4000']);
    // The caller stops after the first chunk: the read under way ends before the generator does.
    log.length = 0;
    for await (const c of chunksInTurn(fh, 'stub', 0)) {
      expect(c.length).toBe(1000);
      break;
    }
    expect(log).toEqual(['read 0', 'done 0', 'read 1000', 'done 1000']);
  });

  it('a named pipe: read where it stands, in chunks of what the pipe holds (a size of 0 from stat is no size)', async () => {
    const fifo = join(dir, 'turns.fifo');
    execFileSync('mkfifo', [fifo]);
    const text = Buffer.from(Array.from({ length: 50_000 }, (_, i) => `${i},y\n`).join(''));
    // The writer in another process: this one reads.
    const writer = spawn('sh', ['-c', `cat > '${fifo}'`], { stdio: ['pipe', 'ignore', 'inherit'] });
    writer.stdin.end(text);
    const chunks = await chunksOf(fifo, null);
    expect(Buffer.concat(chunks.map((c) => c.bytes)).equals(text)).toBe(true);
    // ~390 kB in pipe-sized reads (64 KiB here, from memory: Linux's default pipe capacity), not a byte at a time.
    expect(chunks.length).toBeLessThan(200);
  });
});
