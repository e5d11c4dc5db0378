/**
 * Byte ranges of one input read as separate pieces (src/io/slices.ts): with every start checked
 * against the end of the slice before, and a slice whose guess was wrong read again from there,
 * the slices together yield exactly the records a front-to-back read does, and their line counts
 * give every record its physical line. Inputs hold quoted fields with line breaks, so some
 * guesses are wrong (a line end inside a quoted field); the reference read is the engine's own
 * whole-file read, checked against csv-parse elsewhere (reader.differential.test.ts).
 */
import { statSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { readInput } from '../src/io/input.js';
import { RecordReader, type RecordReaderOptions } from '../src/io/reader.js';
import { guessRecordStart, readSlice, type InputSlice, type SliceRead } from '../src/io/slices.js';
import { guessStart, plausibleRecords } from '../src/io/record-start.js';
import type { InputSchema } from '../src/io/batch.js';
import { createRandom, makeSensorCsv, makeTempDir, removeDir } from './helpers/engine.js';

let dir: string;
beforeAll(() => (dir = makeTempDir()));
afterAll(() => removeDir(dir));

interface Rec {
  offset: number;
  line: number;
  text: string;
}

const options = (file: string, onBadRecord: RecordReaderOptions['onBadRecord'] = 'fail'): RecordReaderOptions => ({ format: 'csv', header: true, wanted: ['fault'], file, onBadRecord });

async function wholeRead(path: string): Promise<{ recs: Rec[]; schema: InputSchema }> {
  const recs: Rec[] = [];
  let schema: InputSchema | null = null;
  for await (const { batch, schema: s } of readInput(path, options(path))) {
    schema = s;
    for (let i = 0; i < batch.count; i++) recs.push({ offset: batch.offset[i]!, line: batch.line[i]!, text: batch.data.toString('latin1', batch.start[i]!, batch.end[i]!) });
  }
  return { recs, schema: schema! };
}

/** Reads the cuts as slices, checks the chain, re-reads wrong slices from the right start; returns the records with physical lines. */
async function slicedRead(path: string, cuts: number[], schema: InputSchema): Promise<{ recs: Rec[]; rereads: number }> {
  const edges = [0, ...cuts, -1];
  const out: Rec[] = [];
  let rereads = 0;
  let prevEnd = 0;
  let lineBase = 0;
  for (let j = 0; j + 1 < edges.length; j++) {
    // A read from a wrong guess may meet what looks like a malformed record (the middle of a
    // quoted field); it counts only once its start is known to be right.
    const once = async (slice: InputSlice): Promise<{ read: SliceRead; recs: Rec[]; error: unknown }> => {
      const read: SliceRead = { start: 0, end: 0, lines: 0, records: 0, bytes: 0, rejected: 0 };
      const recs: Rec[] = [];
      try {
        for await (const { batch } of readSlice(path, slice, options(path), slice.start === 0 ? null : schema, read)) {
          for (let i = 0; i < batch.count; i++) recs.push({ offset: batch.offset[i]!, line: batch.line[i]!, text: batch.data.toString('latin1', batch.start[i]!, batch.end[i]!) });
        }
      } catch (error) {
        return { read, recs, error };
      }
      return { read, recs, error: null };
    };
    let r = await once({ input: 0, start: edges[j]!, end: edges[j + 1]!, exact: j === 0 });
    if (j > 0 && r.read.start !== prevEnd) {
      rereads++;
      r = await once({ input: 0, start: prevEnd, end: edges[j + 1]!, exact: true });
    }
    if (r.error) throw r.error;
    // Slice 0 counts physical lines itself; the others from line 1 at their start.
    for (const rec of r.recs) out.push({ ...rec, line: j === 0 ? rec.line : rec.line + lineBase });
    lineBase = j === 0 ? r.read.lines : lineBase + r.read.lines;
    prevEnd = r.read.end;
  }
  return { recs: out, rereads };
}

describe('reading an input in slices', () => {
  it('gives the records, offsets and lines of a whole read, for random cuts, quoted line breaks included', async () => {
    const path = join(dir, 'readings.csv');
    writeFileSync(path, makeSensorCsv({ rows: 3000, seed: 8 }));
    const size = statSync(path).size;
    const whole = await wholeRead(path);
    const rnd = createRandom(4);
    let rereads = 0;
    for (let trial = 0; trial < 30; trial++) {
      const n = 1 + Math.floor(rnd() * 6);
      const cuts = Array.from({ length: n }, () => 1 + Math.floor(rnd() * (size - 1))).sort((a, b) => a - b);
      const sliced = await slicedRead(path, [...new Set(cuts)], whole.schema);
      rereads += sliced.rereads;
      expect(sliced.recs).toEqual(whole.recs);
    }
    // The notes' line breaks are followed by the rest of a note, never by whole records of the
    // input's width: every guess was right (the first line end after each cut was wrong for some).
    expect(rereads).toBe(0);
  });

  it('a guess fooled by a quoted field whose lines look like records is caught by the chain and read again', async () => {
    // Each note holds six lines of three unquoted fields, as wide as a record: a cut in its first
    // lines makes the guess take one of them for a record start.
    const path = join(dir, 'lookalike.csv');
    const rnd = createRandom(12);
    const lines = ['id,note,fault'];
    for (let i = 0; i < 400; i++) {
      const inner = Array.from({ length: 6 }, (_, k) => `${k},v${Math.floor(rnd() * 100)},w`).join('\n');
      lines.push(`${i},"${inner}",${rnd() < 0.5 ? 'a' : 'b'}`);
    }
    writeFileSync(path, lines.join('\n') + '\n');
    const size = statSync(path).size;
    const whole = await wholeRead(path);
    let rereads = 0;
    for (let cut = 20; cut < size; cut += 997) {
      const sliced = await slicedRead(path, [cut], whole.schema);
      rereads += sliced.rereads;
      expect(sliced.recs).toEqual(whole.recs);
    }
    expect(rereads).toBeGreaterThan(0);
  });

  it('a cut at every byte of a small input with CRLF line ends', async () => {
    const path = join(dir, 'crlf.csv');
    writeFileSync(path, makeSensorCsv({ rows: 40, seed: 3, crlf: true, noFinalNewline: true }));
    const size = statSync(path).size;
    const whole = await wholeRead(path);
    for (let cut = 1; cut < size; cut += 3) expect((await slicedRead(path, [cut], whole.schema)).recs).toEqual(whole.recs);
  });

  it('a malformed record just past a cut belongs to the next slice: the first one ends cleanly before it', async () => {
    const path = join(dir, 'bad.csv');
    const good = 'id,fault\n1,ok\n2,ok\n';
    writeFileSync(path, `${good}3,ok,extra\n4,ok\n`);
    const reader = new RecordReader(options(path));
    reader.push(Buffer.from('id,fault\n'));
    const read: SliceRead = { start: 0, end: 0, lines: 0, records: 0, bytes: 0, rejected: 0 };
    const recs: number[] = [];
    for await (const { batch } of readSlice(path, { input: 0, start: 0, end: good.length - 1, exact: true }, options(path), null, read)) for (let i = 0; i < batch.count; i++) recs.push(batch.offset[i]!);
    expect(recs).toEqual([9, 14]);
    expect(read.end).toBe(good.length);
    expect(read.lines).toBe(3);
    // The next slice, from there, meets it (under fail, the error names its physical line once shifted: local line 1).
    const next = readSlice(path, { input: 0, start: good.length, end: -1, exact: true }, options(path), reader.schema, { ...read });
    await expect(next.next()).rejects.toMatchObject({ code: 'RDK_FIELD_COUNT', details: { line: 1 } });
  });
});

describe('telling a record start from a line end inside quotes', () => {
  const shape = { delimiter: 0x2c, columns: 3 };
  const buf = (text: string): Buffer => Buffer.from(text, 'latin1');

  it('RFC 4180 section 2, rule 6: after the line break inside "b CRLF bb" the bytes contradict a record start', () => {
    // The RFC's example record: "aaa","b CRLF bb","ccc" CRLF zzz,yyy,xxx
    const text = '"aaa","b\r\nbb","ccc"\r\nzzz,yyy,xxx\r\n';
    expect(plausibleRecords(buf(text), 0, shape, 4)).toBe(2);
    expect(plausibleRecords(buf(text), text.indexOf('\n') + 1, shape, 4)).toBe(-1);
    expect(plausibleRecords(buf(text), text.lastIndexOf('zzz'), shape, 4)).toBe(1);
  });

  it('doubled quotes are data; a record of the wrong width, or text after a closing quote, is a contradiction', () => {
    expect(plausibleRecords(buf('1,"say ""hi""",x\n2,y,z\n'), 0, shape, 4)).toBe(2);
    expect(plausibleRecords(buf('1,2\n'), 0, shape, 4)).toBe(-1);
    expect(plausibleRecords(buf('1,"a"b,c\n'), 0, shape, 4)).toBe(-1);
    // The window ends inside a record: as many whole records as there were, no contradiction;
    // where the input ends there, an open quote is one, and a last record without a line end counts.
    expect(plausibleRecords(buf('1,2,3\n4,"open'), 0, shape, 4)).toBe(1);
    expect(plausibleRecords(buf('1,2,3\n4,"open'), 0, shape, 4, true)).toBe(-1);
    expect(plausibleRecords(buf('1,2,3\n4,5,6'), 0, shape, 4, true)).toBe(2);
  });

  it('where no line end near the cut reads as a record (ragged rows, bare quotes), the guess is the first line end, after a bounded look', () => {
    // 100,000 lines of two fields, then lines of three: the first plausible start lies ~400 KB
    // on, past the span the guess looks over, so it falls back to the first line end.
    const text = 'x\n' + 'a,b\n'.repeat(100_000) + '1,2,3\n'.repeat(10);
    const d = buf(text);
    expect(guessStart(d, 0, d.length, shape, true)).toBe(2);
    // Within the span it is found.
    const near = buf('x\n' + 'a,b\n'.repeat(10) + '1,2,3\n'.repeat(10));
    expect(guessStart(near, 0, near.length, shape, true)).toBe(2 + 40);
  });

  it('the guess skips line ends inside quoted fields, and is the first line end without a shape', async () => {
    const path = join(dir, 'guess.csv');
    const text = 'id,note,label\n1,"first\nsecond ""x"", third\n",a\n2,plain,b\n3,more,c\n';
    writeFileSync(path, text);
    const inside = text.indexOf('second');
    expect(await guessRecordStart(path, inside - 3, shape)).toBe(text.indexOf('2,plain'));
    expect(await guessRecordStart(path, inside - 3, null)).toBe(inside);
  });
});
