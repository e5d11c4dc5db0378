/**
 * Bad input: each fault has its own code, names the physical line (as an editor shows it) and
 * the field position, and under skip/quarantine is counted and handed over instead of thrown.
 * Every case is also read in 1-byte chunks: the verdict must not depend on where chunks end.
 */
import { describe, expect, it } from 'vitest';
import { readAll, readError } from './reader.helpers.js';
import { RowdeckError } from '../src/errors.js';
import { RecordReader } from '../src/io/reader.js';

function bothChunkings(input: string, opts: Parameters<typeof readError>[1] = {}): ReturnType<typeof readError> {
  const whole = readError(input, opts);
  const bytewise = readError(input, opts, 1);
  expect(bytewise).toEqual(whole);
  return whole;
}

describe('fail fast (default)', () => {
  it('RDK_FIELD_COUNT names the physical line after a multi-line record, and the column', () => {
    const input = 'id,note,v,w\n1,"two\nlines",3,4\n2,x,3,4,5\n';
    const e = bothChunkings(input);
    expect(e.code).toBe('RDK_FIELD_COUNT');
    expect(e.details).toMatchObject({ file: 'data.csv', line: 4, column: 5 });
    expect(e.message).toBe('data.csv:4:5: record has 5 fields, the header has 4. Quote fields that contain "," or use --on-bad-record skip|quarantine to set such records aside.');
  });
  it('RDK_FIELD_COUNT for too few fields, in a quoted record and in TSV', () => {
    expect(bothChunkings('a,b,c\n"x",y\n').details).toMatchObject({ line: 2, column: 3 });
    const t = bothChunkings('a\tb\n1\n', { format: 'tsv' });
    expect(t.code).toBe('RDK_FIELD_COUNT');
    expect(t.message).toContain('contain a tab');
  });
  it('RDK_UNTERMINATED_QUOTE at EOF reports the line where the quoted field began', () => {
    const e = bothChunkings('a,b\n1,2\n3,"never closed\nmore\nand more\n');
    expect(e.code).toBe('RDK_UNTERMINATED_QUOTE');
    expect(e.details).toMatchObject({ line: 3, column: 2 });
    // The quote opens on a later physical line of a multi-line record.
    const f = bothChunkings('a,b\n"x\ny","\nz\n');
    expect(f.details).toMatchObject({ line: 3, column: 2 });
  });
  it('RDK_STRAY_QUOTE for a quote inside an unquoted field and for text after a closing quote', () => {
    const a = bothChunkings('a,b\n1,ab"c\n');
    expect(a.code).toBe('RDK_STRAY_QUOTE');
    expect(a.details).toMatchObject({ line: 2, column: 2 });
    const b = bothChunkings('a,b\n"x\ny"z,1\n');
    expect(b.code).toBe('RDK_STRAY_QUOTE');
    expect(b.details).toMatchObject({ line: 3, column: 1 });
    expect(b.message).toMatch(/^data\.csv:3:1: text follows the closing quote/);
  });
  it('RDK_INPUT_EMPTY for no bytes, a BOM only, or blank lines only', () => {
    for (const input of ['', '\ufeff', '\n\r\n\n']) {
      expect(bothChunkings(input).code).toBe('RDK_INPUT_EMPTY');
      expect(readError(input, { header: false }).code).toBe('RDK_INPUT_EMPTY');
    }
  });
  it('RDK_HEADER_ONLY with or without a final line end, and after blank lines', () => {
    for (const input of ['a,b\n', 'a,b', 'a,b\r\n\r\n\n']) expect(bothChunkings(input).code).toBe('RDK_HEADER_ONLY');
  });
  it('RDK_DUPLICATE_HEADER names both positions', () => {
    const e = bothChunkings('site,temp,"site"\n1,2,3\n');
    expect(e.code).toBe('RDK_DUPLICATE_HEADER');
    expect(e.details).toMatchObject({ line: 1, column: 3 });
    expect(e.message).toContain('columns 1 and 3');
  });
  it('a bad header fails whatever the policy', () => {
    expect(readError('a,b"\n1,2\n', { onBadRecord: 'skip' }).code).toBe('RDK_STRAY_QUOTE');
  });
  it('RDK_UNKNOWN_COLUMN suggests the closest name and lists the columns', () => {
    const e = bothChunkings('sensor_id,fault,temp_c\n1,none,3\n', { wanted: ['falut'] });
    expect(e.code).toBe('RDK_UNKNOWN_COLUMN');
    expect(e.message).toBe('data.csv: no column named "falut". Did you mean "fault"? Columns: sensor_id, fault, temp_c.');
    expect(readError('{"a":1,"site":2}\n', { format: 'jsonl', wanted: ['sites'] }).message).toContain('Did you mean "site"?');
  });
  it('RDK_HEADER_MISMATCH names both inputs and the first differing column', () => {
    const e = readError('a,c\n1,2\n', { expectedColumns: ['a', 'b'], expectedFrom: 'first.csv' });
    expect(e.code).toBe('RDK_HEADER_MISMATCH');
    expect(e.message).toContain('data.csv:1:2');
    expect(e.message).toContain('first.csv has "b"');
    expect(readError('a,b,c\n1,2,3\n', { expectedColumns: ['a', 'b'] }).details).toMatchObject({ column: 3 });
  });
  it('errors are RowdeckError instances with a stable code', () => {
    const r = new RecordReader({ format: 'csv', header: true, wanted: [], file: 'x.csv', onBadRecord: 'fail' });
    r.push(Buffer.from('a,b\n1,2,3\n').subarray(0, 4));
    expect(() => r.push(Buffer.from('1,2,3\n'))).toThrow(RowdeckError);
  });
  it('a quoted field still open after maxRecordBytes is reported at the line its record began', () => {
    const input = 'a,b\n1,2\n3,"open' + 'x\n'.repeat(2000);
    const e = readError(input, { maxRecordBytes: 1000 }, 100);
    expect(e.code).toBe('RDK_UNTERMINATED_QUOTE');
    expect(e.details).toMatchObject({ line: 3 });
    expect(e.message).toContain('never closed (read to the end of the input, past the 1000 bytes');
    // Under the limit the same input ends as an ordinary unterminated quote at EOF.
    expect(readError(input, { maxRecordBytes: 1e6 }, 100).message).toMatch(/^data\.csv:3:2: a quoted field starts here/);
  });
  it('a quoted field over maxRecordBytes that is closed further on is RDK_FIELD_TOO_LONG, not an open quote, whatever the chunks', () => {
    // RFC 4180 section 2.7: a quote inside a quoted field is written twice; those must not end it.
    const body = 'x""y\n'.repeat(400); // 2,400 bytes, doubled quotes throughout
    for (const tail of ['",5\n6,7\n', '",5\n', '",5']) {
      const input = `a,b\n1,2\n"${body}${tail}`;
      for (const chunk of [1, 7, 100]) {
        const e = readError(input, { maxRecordBytes: 1000 }, chunk);
        expect(e.code, `tail ${JSON.stringify(tail)}, chunks of ${chunk}`).toBe('RDK_FIELD_TOO_LONG');
        expect(e.details).toMatchObject({ line: 3 });
        expect(e.message).toMatch(/^data\.csv:3: the record starting here holds a quoted field longer than 1000 bytes/);
      }
      // The same field under the limit is read as one record.
      expect(readAll(input, { maxRecordBytes: 1e6 }).records.length).toBe(tail.endsWith('6,7\n') ? 3 : 2);
    }
    // Still open at the end, its doubled quotes notwithstanding: an unterminated quote.
    for (const chunk of [1, 100]) expect(readError(`a,b\n3,"${body}`, { maxRecordBytes: 1000 }, chunk).code).toBe('RDK_UNTERMINATED_QUOTE');
  });
  it('an invalid delimiter is a usage error', () => {
    for (const delimiter of ['"', '\n', ';;', 'é']) {
      expect(() => new RecordReader({ format: 'csv', delimiter, header: true, wanted: [], file: 'x', onBadRecord: 'fail' })).toThrow(expect.objectContaining({ code: 'RDK_OPTION' }));
    }
  });
});

describe('skip and quarantine', () => {
  const input = [
    'id,note,v', // 1
    '1,ok,1', // 2
    '2,too,many,fields', // 3
    '3,"multi', // 4
    'line",3', // 5
    '4,bad"quote,4', // 6
    '5,"after"x,5', // 7
    '6,short', // 8
    '7,"fine, quoted",7', // 9
    '8,"open at the end', // 10
    'still open', // 11
  ].join('\n');
  for (const policy of ['skip', 'quarantine'] as const) {
    it(`${policy}: keeps going, counts, and reports each refused record with its line and code`, () => {
      for (const chunk of [1 << 20, 1, 3, 7]) {
        const r = readAll(input, { onBadRecord: policy, wanted: ['id'] }, chunk);
        expect(r.fields.map((f) => f[0])).toEqual(['1', '3', '7']);
        expect(r.lines).toEqual([2, 4, 9]);
        expect(r.rejected.map((x) => [x.line, x.code])).toEqual([
          [3, 'RDK_FIELD_COUNT'],
          [6, 'RDK_STRAY_QUOTE'],
          [7, 'RDK_STRAY_QUOTE'],
          [8, 'RDK_FIELD_COUNT'],
          [10, 'RDK_UNTERMINATED_QUOTE'],
        ]);
        expect(r.rejected.map((x) => x.bytes.toString())).toEqual(['2,too,many,fields', '4,bad"quote,4', '5,"after"x,5', '6,short', '8,"open at the end\nstill open']);
        expect(r.rejected.every((x) => x.file === 'data.csv' && x.reason.length > 20)).toBe(true);
        expect(r.reader.stats).toMatchObject({ records: 3, rejected: 5, lines: 11 });
      }
    });
  }
  it('a file whose records are all refused is not "header only"', () => {
    const r = readAll('a,b\n1\n2\n', { onBadRecord: 'skip' });
    expect(r.records).toEqual([]);
    expect(r.reader.stats.rejected).toBe(2);
  });
});

describe('JSON Lines', () => {
  const input = [
    '{"site":"north","temp":21.5,"fault":"none","tags":["a","}"]}',
    '',
    '{"temp":-3e2,"site":"la\\"ke","fault":null,"nested":{"site":"inner"}}',
    '  {"fault":"drift","site":"\\u00e9t\\u00e9"}  ',
    '{"s\\u0069te":"escaped key","temp":true,"fault":"spike"}',
  ].join('\r\n');
  it('locates the raw value of top-level keys; null or absent is missing', () => {
    for (const chunk of [1 << 20, 1, 5]) {
      const r = readAll(input, { format: 'jsonl', wanted: ['site', 'temp', 'fault'], file: 'x.jsonl' }, chunk);
      expect(r.fields).toEqual([
        ['north', '21.5', 'none'],
        ['la"ke', '-3e2', null],
        ['été', null, 'drift'],
        ['escaped key', 'true', 'spike'],
      ]);
      expect(r.lines).toEqual([1, 3, 4, 5]);
      expect(r.reader.schema).toMatchObject({ format: 'jsonl', columns: ['site', 'temp', 'fault', 'tags'], headerBytes: null, lineEnding: '\r\n' });
      expect(r.records[2]).toBe('  {"fault":"drift","site":"\\u00e9t\\u00e9"}  ');
    }
  });
  it('RDK_INVALID_JSON names the line and the position; skip counts it', () => {
    const bad = '{"a":1}\n{"a":2,}\n[1,2]\n{"a":3}\n';
    const e = readError(bad, { format: 'jsonl', file: 'x.jsonl' });
    expect(e.code).toBe('RDK_INVALID_JSON');
    expect(e.details).toMatchObject({ line: 2 });
    expect(e.message).toMatch(/^x\.jsonl:2(:\d+)?: invalid JSON/);
    const r = readAll(bad, { format: 'jsonl', onBadRecord: 'skip', wanted: ['a'] }, 2);
    expect(r.fields).toEqual([['1'], ['3']]);
    expect(r.rejected.map((x) => x.line)).toEqual([2, 3]);
  });
  it('a key wanted twice is located twice', () => {
    expect(readAll('{"a":1,"b":"x"}\n', { format: 'jsonl', wanted: ['b', 'a', 'b'] }).fields).toEqual([['x', '1', 'x']]);
    expect(readAll('a,b\n1,"x"\n', { wanted: ['b', 'a', 'b'] }).fields).toEqual([['x', '1', 'x']]);
  });
  it('an empty JSON Lines input is RDK_INPUT_EMPTY', () => {
    expect(readError('\n  \n', { format: 'jsonl' }).code).toBe('RDK_INPUT_EMPTY');
  });
});
