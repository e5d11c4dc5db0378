/**
 * The reader against RFC 4180 section 2 (examples 1-7, rules quoted from the RFC text) and the
 * chunk-boundary cases a streaming splitter must survive. Every input is read with every chunk
 * size from 1 byte to its whole length, so each boundary position is exercised.
 */
import { describe, expect, it } from 'vitest';
import { readAll } from './reader.helpers.js';
import { splitRecordFields } from '../src/io/fields.js';
import { decodeCsvQuoted } from '../src/core/record-batch.js';
import type { RecordReaderOptions } from '../src/io/reader.js';

/** Decoded fields of every record, by splitting each record's content with splitRecordFields. */
function fieldsOf(input: string | Buffer, opts: Partial<RecordReaderOptions>, chunk: number): string[][] {
  const r = readAll(input, opts, chunk);
  return r.raw.map((raw, i) => {
    const content = Buffer.from(r.records[i]!, 'utf8');
    void raw;
    const s = new Uint32Array(64), e = new Uint32Array(64), k = new Uint8Array(64);
    const n = splitRecordFields(content, 0, content.length, (opts.delimiter ?? ',').charCodeAt(0), s, e, k);
    return Array.from({ length: n }, (_, f) => (k[f] === 1 ? decodeCsvQuoted(content, s[f]!, e[f]!) : content.toString('utf8', s[f], e[f])));
  });
}

/** Same result for every chunk size 1..length. */
function expectAllChunkings(input: string | Buffer, opts: Partial<RecordReaderOptions>, expected: string[][]): void {
  const len = Buffer.byteLength(input);
  for (let c = 1; c <= len; c++) expect(fieldsOf(input, opts, c), `chunk size ${c}`).toEqual(expected);
}

describe('RFC 4180 section 2', () => {
  it('rule 1: records end with CRLF (example: aaa,bbb,ccc CRLF zzz,yyy,xxx CRLF)', () => {
    // RFC 4180 §2.1
    expectAllChunkings('aaa,bbb,ccc\r\nzzz,yyy,xxx\r\n', { header: false }, [['aaa', 'bbb', 'ccc'], ['zzz', 'yyy', 'xxx']]);
  });
  it('rule 2: the last record may lack the line break', () => {
    // RFC 4180 §2.2
    expectAllChunkings('aaa,bbb,ccc\r\nzzz,yyy,xxx', { header: false }, [['aaa', 'bbb', 'ccc'], ['zzz', 'yyy', 'xxx']]);
  });
  it('rule 3: optional header line with the same format', () => {
    // RFC 4180 §2.3
    for (let c = 1; c <= 40; c++) {
      const r = readAll('field_name,field_name2,field_name3\r\naaa,bbb,ccc\r\nzzz,yyy,xxx\r\n', { header: true, wanted: ['field_name3'] }, c);
      expect(r.reader.schema?.columns).toEqual(['field_name', 'field_name2', 'field_name3']);
      expect(r.fields).toEqual([['ccc'], ['xxx']]);
      expect(r.lines).toEqual([2, 3]);
    }
  });
  it('rule 4: spaces are part of a field; the last field has no trailing comma; same count per line', () => {
    // RFC 4180 §2.4
    expectAllChunkings(' aaa , bbb,ccc \r\n', { header: false }, [[' aaa ', ' bbb', 'ccc ']]);
    const e = (() => { try { readAll('aaa,bbb,ccc\r\nzzz,yyy\r\n', { header: false }); } catch (err) { return err as { code: string }; } return null; })();
    expect(e?.code).toBe('RDK_FIELD_COUNT');
  });
  it('rule 5: fields may be quoted; quotes may not appear inside unquoted fields', () => {
    // RFC 4180 §2.5
    expectAllChunkings('"aaa","bbb","ccc"\r\nzzz,yyy,xxx', { header: false }, [['aaa', 'bbb', 'ccc'], ['zzz', 'yyy', 'xxx']]);
    expect(() => readAll('aaa,b"bb,ccc\r\n', { header: false })).toThrow(expect.objectContaining({ code: 'RDK_STRAY_QUOTE' }));
  });
  it('rule 6: fields with line breaks, double quotes or commas are quoted', () => {
    // RFC 4180 §2.6
    expectAllChunkings('"aaa","b\r\nbb","ccc"\r\nzzz,yyy,xxx', { header: false }, [['aaa', 'b\r\nbb', 'ccc'], ['zzz', 'yyy', 'xxx']]);
    expectAllChunkings('"a,a","b\nb",c\n', { header: false }, [['a,a', 'b\nb', 'c']]);
  });
  it('rule 7: a quote inside a quoted field is doubled', () => {
    // RFC 4180 §2.7
    expectAllChunkings('"aaa","b""bb","ccc"', { header: false }, [['aaa', 'b"bb', 'ccc']]);
  });
});

describe('beyond the RFC (common practice)', () => {
  it('LF line ends, empty fields, "" and a quoted field at EOF without newline', () => {
    expectAllChunkings('a,,c\n"",x,\n1,2,"3"', { header: false }, [['a', '', 'c'], ['', 'x', ''], ['1', '2', '3']]);
  });
  it('mixed LF and CRLF record ends; a bare CR is data', () => {
    expectAllChunkings('a,b\r\nc,d\ne\rf,g\r\n', { header: false }, [['a', 'b'], ['c', 'd'], ['e\rf', 'g']]);
  });
  it('UTF-8 outside TEXTDATA, cut inside multi-byte characters', () => {
    expectAllChunkings('名前,temp\n"Zürich, Süd",21.5\n東京,19\n🌡️,x\n', { header: false }, [['名前', 'temp'], ['Zürich, Süd', '21.5'], ['東京', '19'], ['🌡️', 'x']]);
  });
  it('TSV and a custom delimiter', () => {
    expectAllChunkings('a\tb\t"c\td"\n1\t2\t3\n', { format: 'tsv', header: false, delimiter: '\t' }, [['a', 'b', 'c\td'], ['1', '2', '3']]);
    expectAllChunkings('a;b,c;"x;y"\n1;2;3\n', { header: false, delimiter: ';' }, [['a', 'b,c', 'x;y'], ['1', '2', '3']]);
  });
  it('blank lines are skipped, not records, but still counted as lines', () => {
    for (let c = 1; c <= 20; c++) {
      const r = readAll('\nh1,h2\n\r\n1,2\n\n\n3,4\n\n', { wanted: ['h2'] }, c);
      expect(r.fields).toEqual([['2'], ['4']]);
      expect(r.lines).toEqual([4, 7]);
      expect(r.reader.stats.lines).toBe(8);
    }
  });
});

describe('chunk boundaries anywhere', () => {
  const input = '\ufeffid,note,v\r\n1,"say ""hi"", then\r\nleave",2\r\n2,plain,3\n3,"",4\r\n4,"x\ry",5';
  const buf = Buffer.from(input, 'utf8');
  const expected = [['1', 'say "hi", then\r\nleave'], ['2', 'plain'], ['3', ''], ['4', 'x\ry']];
  it('every single cut position and every pair of cut positions give the same records', () => {
    const whole = readAll(buf, { wanted: ['id', 'note'] });
    expect(whole.fields).toEqual(expected);
    for (let a = 0; a <= buf.length; a++) {
      for (let b = a; b <= buf.length; b += 3) {
        const r = readAll(buf, { wanted: ['id', 'note'] }, [a, b]);
        expect(r.fields).toEqual(expected);
        expect(r.raw).toEqual(whole.raw);
        expect(r.offsets).toEqual(whole.offsets);
        expect(r.lines).toEqual(whole.lines);
      }
    }
  });
  it('record bytes are preserved exactly and offsets point at them (BOM counted)', () => {
    const r = readAll(buf, { wanted: ['id'] }, 1);
    // Header is 3 BOM bytes + "id,note,v\r\n"; records follow back to back.
    expect(r.offsets[0]).toBe(3 + 11);
    expect(Buffer.concat([buf.subarray(0, 14), ...r.raw])).toEqual(buf);
    for (let i = 0; i < r.raw.length; i++) expect(buf.subarray(r.offsets[i]!, r.offsets[i]! + r.raw[i]!.length)).toEqual(r.raw[i]);
    expect(r.lines).toEqual([2, 4, 5, 6]);
    expect(r.reader.schema?.columns).toEqual(['id', 'note', 'v']);
    expect(r.reader.schema?.headerBytes?.toString()).toBe('id,note,v');
    expect(r.reader.schema?.lineEnding).toBe('\r\n');
  });
  it('cut between the two quotes of a doubled quote and between CR and LF', () => {
    const s = 'a,b\n"x""y",z\r\n';
    const at = s.indexOf('""') + 1;
    const crlf = s.indexOf('\r\n') + 1;
    for (const cuts of [[at], [crlf], [at, crlf]]) {
      const r = readAll(s, { wanted: ['a', 'b'] }, cuts);
      expect(r.fields).toEqual([['x"y', 'z']]);
      expect(r.records).toEqual(['"x""y",z']);
    }
  });
  it('cut inside the BOM', () => {
    const s = Buffer.from('\ufeffa,b\n1,2\n');
    for (const cut of [1, 2]) {
      const r = readAll(s, { wanted: ['a'] }, [cut]);
      expect(r.reader.schema?.columns).toEqual(['a', 'b']);
      expect(r.offsets).toEqual([7]);
    }
  });
  it('a quoted field larger than many chunks is read intact', () => {
    const big = 'x'.repeat(300_000) + '\n' + '""'.repeat(1000);
    const s = `k,v\n1,"${big.replaceAll('"', '""')}"\n2,end\n`;
    const r = readAll(s, { wanted: ['v'] }, 4096);
    expect(r.fields).toEqual([[big], ['end']]);
    expect(r.lines).toEqual([2, 4]);
  });
});

describe('header option', () => {
  it('without a header the columns are named column_1..N and the first line is data', () => {
    const r = readAll('a,b\n1,2\n', { header: false, wanted: ['column_2'] }, 1);
    expect(r.reader.schema?.columns).toEqual(['column_1', 'column_2']);
    expect(r.reader.schema?.headerBytes).toBeNull();
    expect(r.fields).toEqual([['b'], ['2']]);
    expect(r.lines).toEqual([1, 2]);
  });
  it('a quoted header name is decoded', () => {
    const r = readAll('"sensor, id","a""b"\n1,2\n', { wanted: ['sensor, id', 'a"b'] });
    expect(r.fields).toEqual([['1', '2']]);
  });
});
