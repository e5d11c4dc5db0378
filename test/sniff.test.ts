/**
 * The format of a run's inputs (src/io/sniff.ts): from --format, the names, or the first bytes;
 * one format per run; what cannot be read refused before reading, with the likely cause and the
 * option to pass. Magic numbers: gzip 1f 8b (RFC 1952 section 2.3.1), zstd 28 b5 2f fd (RFC 8878
 * section 3.1.1), xz fd 37 7a 58 5a 00 (the .xz file format, section 2.1.1.1), bzip2 "BZh" and a
 * block size digit, zip 50 4b 03 04 (APPNOTE section 4.3.7), UTF-16 byte order marks ff fe / fe ff
 * (Unicode, section 23.8); from memory, each checked against the files the tools write below where
 * the tool is installed.
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { profile, shuffle } from '../src/index.js';
import { chooseFormat, sniffContent } from '../src/io/sniff.js';

const CLI = fileURLToPath(new URL('../dist/cli/main.cjs', import.meta.url));
let dir = '';

const CSV = 'reading_id,site,fault\n1,north,none\n2,south,drift\n3,north,spike\n4,east,none\n';
const TSV = 'reading_id\tsite\tfault\n1\tnorth\tnone\n2\tsouth\tdrift\n';
const JSONL = '{"reading_id":1,"fault":"none"}\n{"reading_id":2,"fault":"drift"}\n{"reading_id":3,"fault":"none"}\n';

const flag = (v: string): string => `--format ${v}`;

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-sniff-'));
  const files: Record<string, string | Buffer> = {
    'a.csv': CSV,
    'b.tsv': TSV,
    'c.jsonl': JSONL,
    'objects.csv': JSONL,
    'readings.txt': TSV,
    'events.log': JSONL,
    'plain.csv.gz': CSV,
    'packed.data': gzipSync(JSONL),
    'z.csv': Buffer.from([0x28, 0xb5, 0x2f, 0xfd, 0x24, 0x00, 0x01, 0x00]),
    'x.csv.gz': Buffer.from([0xfd, 0x37, 0x7a, 0x58, 0x5a, 0x00, 0x00, 0x04]),
    'b.csv': Buffer.concat([Buffer.from('BZh91AY&SY'), Buffer.alloc(8)]),
    'zip.csv': Buffer.from([0x50, 0x4b, 0x03, 0x04, 0x14, 0x00]),
    'junk.csv.gz': Buffer.from([0x00, 0x01, 0x02, 0x03, 0x00, 0x10]),
    'wide.csv': Buffer.concat([Buffer.from([0xff, 0xfe]), Buffer.from('a,b\n1,2\n', 'utf16le')]),
  };
  for (const [name, body] of Object.entries(files)) writeFileSync(join(dir, name), body);
});
afterAll(() => rmSync(dir, { recursive: true, force: true }));

const at = (name: string): string => join(dir, name);

async function refusal(inputs: string[], format: 'csv' | 'tsv' | 'jsonl' | null = null): Promise<{ code: string; message: string }> {
  try {
    await chooseFormat(inputs, format, flag);
  } catch (err) {
    const e = err as { code: string; message: string };
    return { code: e.code, message: e.message };
  }
  throw new Error('expected a refusal');
}

describe('what the first bytes say', () => {
  it.each([
    ['a JSON object', JSONL, 'jsonl'],
    ['a JSON object after a byte order mark and blank lines', `\ufeff\n\n${JSONL}`, 'jsonl'],
    ['a header with commas', CSV, 'csv'],
    ['a header with tabs and no commas', TSV, 'tsv'],
    ['tabs and commas (commas win: a CSV with tabs in a field)', 'a,b\tc\n1,2\n', 'csv'],
    ['a tab inside quotes only', '"a\tb",c\n', 'csv'],
    ['one column', 'reading_id\n1\n', 'csv'],
  ])('%s: %s', (_what, text, want) => {
    expect(sniffContent(Buffer.from(text))?.format).toBe(want);
  });
  it('nothing to go by: null', () => {
    expect(sniffContent(Buffer.from(' \n\r\n'))).toBeNull();
  });
});

describe('one format for the run', () => {
  it.each([
    ['names', ['a.csv'], 'csv'],
    ['names, several of one format', ['a.csv', 'plain.csv.gz'], 'csv'],
    ['an unknown name: the first bytes (tabs)', ['readings.txt'], 'tsv'],
    ['an unknown name: the first bytes (JSON objects)', ['events.log'], 'jsonl'],
    ['gzip under an unknown name: looked into', ['packed.data'], 'jsonl'],
  ] as const)('%s', async (_what, names, want) => {
    expect(await chooseFormat(names.map(at), null, flag)).toBe(want);
  });

  it('--format wins over names and bytes (no mixing check: every input is read so)', async () => {
    expect(await chooseFormat([at('objects.csv')], 'csv', flag)).toBe('csv');
    expect(await chooseFormat([at('a.csv'), at('c.jsonl')], 'jsonl', flag)).toBe('jsonl');
  });

  it.each([
    [
      'CSV and JSON Lines mixed',
      ['a.csv', 'c.jsonl'],
      'the inputs are not all of one format: {A} is CSV (by its name), {B} is JSON Lines (by its name). A run reads one format: convert them to one first, or give them to separate runs (--format csv reads every input as CSV).',
    ],
    [
      'CSV and TSV mixed, one told by its bytes',
      ['a.csv', 'readings.txt'],
      'the inputs are not all of one format: {A} is CSV (by its name), {B} is TSV (by its first bytes). A run reads one format: convert them to one first, or give them to separate runs (--format csv reads every input as CSV).',
    ],
    ['a .csv of JSON objects', ['objects.csv'], '{A}: its first line is a JSON object: it looks like JSON Lines, not CSV as its name says. Pass --format jsonl if it is (or name it .jsonl).'],
    ['zstd', ['z.csv'], '{A}: zstd-compressed data, which rowdeck does not read (it reads plain text and gzip). Decompress it first, e.g. zstd -dc {A} | rowdeck shuffle - --format csv ….'],
    ['xz named .gz', ['x.csv.gz'], '{A}: xz-compressed data, which rowdeck does not read (it reads plain text and gzip). Decompress it first, e.g. xz -dc {A} | rowdeck shuffle - --format csv ….'],
    ['bzip2', ['b.csv'], '{A}: bzip2-compressed data, which rowdeck does not read (it reads plain text and gzip). Decompress it first, e.g. bzip2 -dc {A} | rowdeck shuffle - --format csv ….'],
    ['zip', ['zip.csv'], '{A}: zip-compressed data, which rowdeck does not read (it reads plain text and gzip). Decompress it first, e.g. unzip -p {A} | rowdeck shuffle - --format csv ….'],
    [
      'a .gz that is neither gzip nor text',
      ['junk.csv.gz'],
      '{A}: named .gz but not gzip data (it does not start with the gzip bytes 1f 8b) nor text: it is damaged, or compressed with another tool. Decompress it with that tool and pass the result on standard input (… | rowdeck shuffle - --format csv …).',
    ],
    ['UTF-16', ['wide.csv'], '{A}: UTF-16 text (it starts with a UTF-16 byte order mark); rowdeck reads UTF-8. Convert it first, e.g. iconv -f UTF-16 -t UTF-8 {A} > converted.csv.'],
  ] as const)('%s: RDK_INPUT_FORMAT, naming the cause', async (_what, names, message) => {
    const paths = names.map(at);
    const r = await refusal(paths);
    expect(r.code).toBe('RDK_INPUT_FORMAT');
    expect(r.message).toBe(message.replaceAll('{A}', paths[0]!).replaceAll('{B}', paths[1] ?? ''));
  });

  it('a plain-text file named .gz is read as what it holds (gzip is told by its bytes)', async () => {
    expect(await chooseFormat([at('plain.csv.gz')], null, flag)).toBe('csv');
  });

  it('the library spells the option as the library does', async () => {
    const err = await shuffle({ inputs: [at('objects.csv')], out: join(dir, 'never') }).then(
      () => null,
      (e: Error) => e,
    );
    expect(err?.message).toContain('Pass format: "jsonl" if it is');
    expect(readdirSync(dir)).not.toContain('never');
  });

  it('profile reads each input named as a format as that format, and refuses a mix told by bytes', async () => {
    const both = await profile({ inputs: [at('a.csv'), at('c.jsonl')], stratify: 'fault', threads: 0 });
    expect(both.inputs.map((x) => x.format)).toEqual(['csv', 'jsonl']);
    await expect(profile({ inputs: [at('a.csv'), at('events.log')] })).rejects.toMatchObject({ code: 'RDK_INPUT_FORMAT' });
    const p = await profile({ inputs: [at('readings.txt')], stratify: 'fault', threads: 0 });
    expect(p.inputs[0]!.format).toBe('tsv');
    expect(p.strata!.values.map((v) => v.value)).toEqual([['drift'], ['none']]);
  });
});

describe('standard input: told by its first bytes, and nothing of it lost', () => {
  const run = (args: string[], input: string | Buffer): ReturnType<typeof spawnSync> =>
    spawnSync(process.execPath, [CLI, ...args], { cwd: dir, input, encoding: 'utf8', timeout: 60_000 });

  it.each([
    ['JSON Lines', JSONL, 'jsonl', 3],
    ['TSV', TSV, 'tsv', 2],
    ['CSV', CSV, 'csv', 4],
    ['gzip of JSON Lines', gzipSync(JSONL), 'jsonl', 3],
  ] as const)('%s', (what, input, format, records) => {
    const out = `stdin-${format}-${what.length}`;
    const r = run(['shuffle', '-', '--out', out, '--quiet', '--json', '--seed', 'pipe'], input);
    expect(r.status, String(r.stderr)).toBe(0);
    const m = JSON.parse(String(r.stdout)) as { input: { format: string; records: number }; output: { parts: { path: string }[] } };
    expect(m.input.format).toBe(format);
    expect(m.input.records).toBe(records);
    // Every byte of every record is in the output: the bytes read ahead were given back.
    const text = typeof input === 'string' ? input : JSONL;
    const body = readFileSync(join(dir, out, m.output.parts[0]!.path), 'utf8');
    const lines = (s: string): string[] => s.split('\n').filter((l) => l !== '').sort();
    expect(lines(body)).toEqual(lines(text));
  });

  it('JSON Lines on standard input with --format csv: the user is taken at their word', () => {
    const r = run(['shuffle', '-', '--out', 'stdin-forced', '--format', 'csv', '--quiet'], JSONL);
    expect(r.status).toBe(1);
    expect(String(r.stderr)).not.toContain('RDK_INPUT_FORMAT');
  });
});

/** Compressors found on this machine, and the Debian package of each one missing. */
const TOOLS = [
  ['zstd', ['-q', '-c'], 'zstd'],
  ['xz', ['-c'], 'xz-utils'],
  ['bzip2', ['-c'], 'bzip2'],
] as const;
const missingTools = TOOLS.filter(([tool]) => {
  const probe = spawnSync(tool, ['--help'], { encoding: 'utf8' });
  return probe.error !== undefined;
});
if (missingTools.length > 0) console.log(`sniff.test: not installed, their real output not checked: ${missingTools.map((t) => t[0]).join(', ')} (apt-get install ${missingTools.map((t) => t[2]).join(' ')}).`);

describe('the tools that write these formats, where installed', () => {
  // The refusals above use magic numbers from memory: the real tools' output must be told the same.
  it.each(TOOLS.filter((t) => !missingTools.includes(t)))('%s', async (tool, args) => {
    const packed = spawnSync(tool, args, { input: CSV });
    writeFileSync(at(`real-${tool}.csv`), packed.stdout);
    const r = await refusal([at(`real-${tool}.csv`)]);
    expect(r.code).toBe('RDK_INPUT_FORMAT');
    expect(r.message).toContain(`${tool}-compressed data`);
  });
});
