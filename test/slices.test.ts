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
import { readSlice, type InputSlice, type SliceRead } from '../src/io/slices.js';
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
    // Some cut fell inside a quoted field with a line break: the chain caught and fixed it.
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
