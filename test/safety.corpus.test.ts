/**
 * A corpus of bad inputs and hostile invocations, run through the built CLI as a user would.
 * Each case asserts the exit status (0 / 1 data or environment / 2 usage, the common Unix
 * practice the CLI follows), the error code, the `file:line[:column]` where there is one (lines
 * are physical lines, RFC 4180's records may span several), that nothing reached the user as an
 * "internal error", and that the run left nothing behind: the case's folder is byte for byte what
 * it was before (no output, staging, spill or lock), and no record of a live run stays.
 * A few inputs are unusual but valid (NUL bytes, invalid UTF-8, a BOM): they must be accepted and
 * verify.
 *
 * Permission cases need permissions that bind: as root (CI) they run as the unprivileged account
 * 65534 (nobody); where that is not possible they are skipped with one line saying why.
 */
import { execFileSync } from 'node:child_process';
import { chmodSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, symlinkSync, writeFileSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { hostname, tmpdir } from 'node:os';
import { join } from 'node:path';
import { gzipSync } from 'node:zlib';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runCli } from '../src/cli/main.js';
import { shuffle } from '../src/engine/shuffle.js';
import { verify } from '../src/engine/verify.js';
import { diffSnapshots, permissionsBind, printedError, runRowdeck, snapshot, unprivilegedUser, workEntries, type Run } from './helpers/safety.js';

let base: string;
const nobody = unprivilegedUser();
const canDropPrivileges = nobody !== null || permissionsBind();
const PERMISSION_SKIP = 'permission cases need a non-root user or root that may switch to uid 65534; skipped here';

/** A small valid input with three classes (sorted by class, as exports often are). */
const OK_CSV = 'id,site,reading,fault\n' + Array.from({ length: 60 }, (_, i) => `${i + 1},north-ridge,${(i * 1.5).toFixed(1)},${['none', 'drift', 'spike'][Math.floor(i / 20)]}`).join('\n') + '\n';
const OK_JSONL = Array.from({ length: 40 }, (_, i) => JSON.stringify({ id: i, site: 'river-bend', fault: i % 2 ? 'drift' : 'none' })).join('\n') + '\n';

interface Case {
  name: string;
  /** Files of the case's folder: name -> content (a Buffer, text, or 'fifo:' + what a writer sends). */
  files?: Record<string, string | Buffer>;
  /** More setup in the case's folder (runs after `files`). */
  setup?: (dir: string) => void | Promise<void>;
  args: (dir: string) => string[];
  status: 0 | 1 | 2;
  code?: string;
  /** The message starts with this (a file:line[:column] prefix, or a path). */
  where?: string | RegExp;
  stdin?: string;
  /** Needs binding permissions (run as an unprivileged user when root). */
  unprivileged?: boolean;
  /** Extra checks on success (the output is verified by the corpus loop). */
  then?: (dir: string, r: Run) => void;
  /** The --out folder a successful run makes (relative to the case folder). */
  out?: string;
  /** Run through runCli in this process instead of a child (usage errors only: nothing is touched). */
  inProcess?: boolean;
}

/** A bad input: the reader's verdict, run in this process (paths absolute; messages then start with the folder). */
const csvCase = (name: string, content: string | Buffer, code: string, where: string | RegExp, extra: string[] = []): Case => ({
  name,
  files: { 'in.csv': content },
  args: (d) => ['shuffle', join(d, 'in.csv'), '--out', join(d, 'out'), ...extra],
  status: 1,
  code,
  where,
  inProcess: true,
});

const jsonlCase = (name: string, content: string, status: 1 | 2, code: string, where: string, extra: string[] = []): Case => ({
  name,
  files: { 'in.jsonl': content },
  args: (d) => ['shuffle', join(d, 'in.jsonl'), '--out', join(d, 'out'), ...extra],
  status,
  code,
  where,
  inProcess: true,
});

/** A usage error: refused before any file is touched, so it runs in this process (absolute paths, the same runCli the binary calls). */
const usage = (name: string, extra: string[], code = 'RDK_OPTION'): Case => ({
  name,
  files: { 'in.csv': OK_CSV },
  args: (d) => ['shuffle', join(d, 'in.csv'), '--out', join(d, 'out'), ...extra],
  status: 2,
  code,
  inProcess: true,
});

/** A previous output of rowdeck in `dir/out` (made by the library, here). */
async function makePreviousOutput(dir: string, seed?: string): Promise<void> {
  writeFileSync(join(dir, 'prev.csv'), OK_CSV);
  await shuffle({ inputs: [join(dir, 'prev.csv')], out: join(dir, 'out'), partitions: 2, ...(seed !== undefined ? { seed } : {}) });
}

const CASES: Case[] = [
  // ---- CSV / TSV structure (RFC 4180) ----
  csvCase('unclosed quote at the end of the input', 'a,b\n1,2\n3,"never closed\nmore\n', 'RDK_UNTERMINATED_QUOTE', 'in.csv:3:2:'),
  csvCase('unclosed quote, CRLF line ends', 'a,b\r\n1,2\r\n3,"open\r\nstill\r\n', 'RDK_UNTERMINATED_QUOTE', 'in.csv:3:2:'),
  csvCase('stray quote inside an unquoted field', 'a,b\n1,ab"c\n', 'RDK_STRAY_QUOTE', 'in.csv:2:2:'),
  csvCase('text after a closing quote', 'a,b\n"x\ny"z,1\n', 'RDK_STRAY_QUOTE', 'in.csv:3:1:'),
  csvCase('ragged row: one field too many', 'a,b,c\n1,2,3\n4,5,6,7\n', 'RDK_FIELD_COUNT', 'in.csv:3:4:'),
  csvCase('ragged row: one field too few', 'a,b,c\n1,2,3\n4,5\n', 'RDK_FIELD_COUNT', 'in.csv:3:3:'),
  csvCase('ragged row after a multi-line quoted field', 'a,b\n1,"two\nlines"\n2,3,4\n', 'RDK_FIELD_COUNT', 'in.csv:4:3:'),
  csvCase('empty file', '', 'RDK_INPUT_EMPTY', 'in.csv:'),
  csvCase('byte order mark only', '\ufeff', 'RDK_INPUT_EMPTY', 'in.csv:'),
  csvCase('blank lines only', '\n\r\n\n', 'RDK_INPUT_EMPTY', 'in.csv:'),
  csvCase('header only', 'a,b,c\n', 'RDK_HEADER_ONLY', 'in.csv:'),
  csvCase('header only, with a byte order mark and no line end', '\ufeffa,b', 'RDK_HEADER_ONLY', 'in.csv:'),
  csvCase('byte order mark, then a ragged row', '\ufeffa,b\n1,2\n3\n', 'RDK_FIELD_COUNT', 'in.csv:3:2:'),
  csvCase('duplicate header', 'site,temp,"site"\n1,2,3\n', 'RDK_DUPLICATE_HEADER', 'in.csv:1:3:'),
  csvCase('TSV ragged row', 'a\tb\n1\t2\n3\t4\t5\n', 'RDK_FIELD_COUNT', 'in.csv:3:3:', ['--format', 'tsv']),
  csvCase('unknown stratify column', OK_CSV, 'RDK_UNKNOWN_COLUMN', 'in.csv: no column named "falut"', ['--stratify', 'falut']),
  csvCase('a bins column that is not numeric', 'id,temp\n1,3.5\n2,warm\n3,4\n', 'RDK_NOT_NUMERIC', 'in.csv:3', ['--stratify', 'temp:bins=2']),
  csvCase('class too small for the partitions at the tolerance', 'id,c\n1,a\n2,a\n3,a\n4,a\n5,b\n', 'RDK_TOLERANCE', /^Cannot keep class c="b"/, ['--stratify', 'c', '--partitions', '4', '--tolerance', '0.1']),
  csvCase('split counts that do not add up', OK_CSV, 'RDK_SPLIT_SIZES', /^--split counts add up to 50/, ['--split', 'train=40,test=10']),
  csvCase('every record refused under skip', 'a,b\n1\n2\n3\n', 'RDK_INPUT_EMPTY', 'in.csv', ['--on-bad-record', 'skip']),
  {
    name: '1,000,000 columns with a row one field short',
    setup: (d) => {
      const n = 1_000_000;
      const cols = Array.from({ length: n }, (_, i) => `c${i}`);
      writeFileSync(join(d, 'in.csv'), `${cols.join(',')}\n${cols.map((_, i) => i % 10).join(',')}\n${cols.slice(1).map((_, i) => i % 7).join(',')}\n`);
    },
    args: () => ['shuffle', 'in.csv', '--out', 'out'],
    status: 1,
    code: 'RDK_FIELD_COUNT',
    where: 'in.csv:3:1000000:',
  },
  {
    name: 'a closed quoted field longer than 64 MiB',
    setup: (d) => writeFileSync(join(d, 'in.csv'), Buffer.concat([Buffer.from('id,note\n1,ok\n2,"'), Buffer.alloc(65 * 1024 * 1024, 0x61), Buffer.from('"\n3,ok\n')])),
    args: () => ['shuffle', 'in.csv', '--out', 'out'],
    status: 1,
    code: 'RDK_FIELD_TOO_LONG',
    where: 'in.csv:3:',
  },
  // ---- JSON Lines ----
  jsonlCase('JSON Lines: an array line', '{"a":1}\n[1,2]\n', 1, 'RDK_INVALID_JSON', 'in.jsonl:2:'),
  jsonlCase('JSON Lines: a number line', '{"a":1}\n{"a":2}\n42\n', 1, 'RDK_INVALID_JSON', 'in.jsonl:3:'),
  jsonlCase('JSON Lines: a string line', '{"a":1}\n"text"\n', 1, 'RDK_INVALID_JSON', 'in.jsonl:2:'),
  jsonlCase('JSON Lines: null', 'null\n{"a":1}\n', 1, 'RDK_INVALID_JSON', 'in.jsonl:1:'),
  jsonlCase('JSON Lines: a line cut short', '{"a":1}\n{"a":2,"b":\n', 1, 'RDK_INVALID_JSON', 'in.jsonl:2: invalid JSON'),
  jsonlCase('JSON Lines: a later record has the fold key (any record, not only the first)', OK_JSONL + '{"id":99,"fold":3}\n' + OK_JSONL, 2, 'RDK_OPTION', 'in.jsonl:41:', ['--folds', '3']),
  jsonlCase('JSON Lines: the fold key written with an escape', OK_JSONL + '{"id":99,"fol\\u0064":null}\n', 2, 'RDK_OPTION', 'in.jsonl:41:', ['--folds', '3']),
  jsonlCase('JSON Lines: the first record has the fold key', '{"id":1,"fold":0}\n{"id":2}\n', 2, 'RDK_OPTION', 'in.jsonl:1:', ['--folds', '2']),
  { name: 'CSV: the header has the fold column', files: { 'in.csv': 'id,fold\n1,a\n2,b\n' }, args: (d) => ['shuffle', join(d, 'in.csv'), '--out', join(d, 'out'), '--folds', '2'], status: 2, code: 'RDK_OPTION', inProcess: true },
  // ---- gzip ----
  { name: 'gzip cut short', files: { 'in.csv.gz': gzipSync(Buffer.from(OK_CSV)).subarray(0, 60) }, args: () => ['shuffle', 'in.csv.gz', '--out', 'out'], status: 1, code: 'RDK_IO', where: 'in.csv.gz: the gzip data is damaged' },
  { name: 'fake gzip (magic bytes, then garbage)', files: { 'in.csv.gz': Buffer.concat([Buffer.from([0x1f, 0x8b]), Buffer.from('not really gzip at all')]) }, args: () => ['shuffle', 'in.csv.gz', '--out', 'out'], status: 1, code: 'RDK_IO', where: 'in.csv.gz: the gzip data is damaged' },
  { name: 'gzip of nothing', files: { 'in.csv.gz': gzipSync(Buffer.alloc(0)) }, args: () => ['shuffle', 'in.csv.gz', '--out', 'out'], status: 1, code: 'RDK_INPUT_EMPTY', where: 'in.csv.gz:' },
  { name: 'gzip with an unclosed quote inside', files: { 'in.csv.gz': gzipSync(Buffer.from('a,b\n1,2\n3,"open\n')) }, args: () => ['shuffle', 'in.csv.gz', '--out', 'out'], status: 1, code: 'RDK_UNTERMINATED_QUOTE', where: 'in.csv.gz:3:2:' },
  // ---- paths ----
  { name: 'a folder as input', setup: (d) => mkdirSync(join(d, 'data.csv')), args: () => ['shuffle', 'data.csv', '--out', 'out'], status: 1, code: 'RDK_IO', where: 'data.csv: reading an input failed: it is a folder' },
  { name: 'a missing input', args: () => ['shuffle', 'nothing.csv', '--out', 'out'], status: 1, code: 'RDK_INPUT_NOT_FOUND', where: 'nothing.csv: no such file' },
  { name: 'the second input missing', files: { 'a.csv': OK_CSV }, args: () => ['shuffle', 'a.csv', 'b.csv', '--out', 'out'], status: 1, code: 'RDK_INPUT_NOT_FOUND', where: 'b.csv: no such file' },
  { name: 'a broken symbolic link as input', setup: (d) => symlinkSync(join(d, 'gone.csv'), join(d, 'link.csv')), args: () => ['shuffle', 'link.csv', '--out', 'out'], status: 1, code: 'RDK_INPUT_NOT_FOUND', where: 'link.csv: no such file' },
  { name: 'two inputs with different headers', files: { 'a.csv': 'x,y\n1,2\n', 'b.csv': 'x,z\n3,4\n' }, args: () => ['shuffle', 'a.csv', 'b.csv', '--out', 'out'], status: 1, code: 'RDK_HEADER_MISMATCH', where: 'b.csv:1:2:' },
  { name: 'a FIFO with a ragged row', files: { 'pipe.csv': 'fifo:a,b\n1,2\n3\n' }, args: () => ['shuffle', 'pipe.csv', '--out', 'out'], status: 1, code: 'RDK_FIELD_COUNT', where: 'pipe.csv:3:2:' },
  { name: 'standard input with a ragged row', stdin: 'a,b\n1,2\n3,4,5\n', args: () => ['shuffle', '-', '--out', 'out'], status: 1, code: 'RDK_FIELD_COUNT', where: '<stdin>:3:3:' },
  { name: 'an input without read permission', unprivileged: true, files: { 'in.csv': OK_CSV }, setup: (d) => chmodSync(join(d, 'in.csv'), 0o000), args: () => ['shuffle', 'in.csv', '--out', 'out'], status: 1, code: 'RDK_PERMISSION', where: 'in.csv: reading an input failed: permission denied' },
  { name: '--out under a read-only folder', unprivileged: true, files: { 'in.csv': OK_CSV }, setup: (d) => { mkdirSync(join(d, 'ro')); chmodSync(join(d, 'ro'), 0o555); }, args: () => ['shuffle', 'in.csv', '--out', 'ro/out'], status: 1, code: 'RDK_PERMISSION', where: /ro\/\.out\.rowdeck-lock: creating the lock file of the output folder failed: permission denied/ },
  { name: '--temp-dir read-only', unprivileged: true, files: { 'in.csv': OK_CSV }, setup: (d) => { mkdirSync(join(d, 'ro')); chmodSync(join(d, 'ro'), 0o555); }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--temp-dir', 'ro'], status: 1, code: 'RDK_PERMISSION', where: /ro: creating the spill folder \(--temp-dir\) failed: permission denied/ },
  { name: '--temp-dir is a file', files: { 'in.csv': OK_CSV, 'spill.txt': 'x' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--temp-dir', 'spill.txt'], status: 1, code: 'RDK_IO', where: /spill\.txt: creating the spill folder failed: it is a file/ },
  { name: '--out below a file (ENOTDIR)', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', 'in.csv/sub'], status: 1, code: 'RDK_IO', where: /in\.csv\/sub: looking at the output folder failed: a part of the path is not a folder/ },
  { name: '--out is a file', files: { 'in.csv': OK_CSV, 'taken.txt': 'mine' }, args: () => ['shuffle', 'in.csv', '--out', 'taken.txt'], status: 1, code: 'RDK_OUTPUT_EXISTS', where: /taken\.txt: exists and is not a folder/ },
  { name: '--out in /proc', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', '/proc/rowdeck-out'], status: 1, code: 'RDK_IO', where: '/proc/.rowdeck-out.rowdeck-lock: creating the lock file' },
  { name: '--out / --force', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', '/', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: '/: --force is refused here: it is the root of the file system' },
  { name: '--out / without --force', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', '/'], status: 1, code: 'RDK_OUTPUT_EXISTS', where: '/: is not empty' },
  { name: 'new parent folders are removed again after a failure', files: { 'in.csv': 'a,b\n1\n' }, args: () => ['shuffle', 'in.csv', '--out', 'deep/er/out', '--temp-dir', 'tmp/spill/here'], status: 1, code: 'RDK_FIELD_COUNT', where: 'in.csv:2:2:' },
  // ---- --force and the output folder ----
  { name: '--out . --force where the input and a note live (the issue\'s reproduction)', files: { 'x.csv': 'id,l\n1,a\n', 'notes.txt': 'keep' }, args: () => ['shuffle', 'x.csv', '--out', '.', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /: --force is refused here: it is the working folder/ },
  { name: '--force on the input\'s own folder', files: { 'data/x.csv': OK_CSV }, args: (d) => ['shuffle', 'data/x.csv', '--out', join(d, 'data'), '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /data: --force is refused here: it is the folder of the input data\/x\.csv/ },
  { name: '--force on a folder above the input', files: { 'top/data/x.csv': OK_CSV }, args: () => ['shuffle', 'top/data/x.csv', '--out', 'top', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /top: --force is refused here: it holds the input top\/data\/x\.csv/ },
  { name: '--force on a folder above the working folder', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', '..', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /--force is refused here: it holds the working folder/ },
  { name: 'a non-empty --out without --force', files: { 'in.csv': OK_CSV, 'out/mine.txt': 'mine' }, args: () => ['shuffle', 'in.csv', '--out', 'out'], status: 1, code: 'RDK_OUTPUT_EXISTS', where: /out: is not empty \(1 entry: "mine\.txt"\)/ },
  { name: '--force on a folder with no manifest', files: { 'in.csv': OK_CSV, 'out/mine.txt': 'mine', 'out/part-00000.csv': 'a\n' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /out: holds no manifest\.json/ },
  {
    name: '--force on a previous output with a file of the user added',
    files: { 'in.csv': OK_CSV },
    setup: async (d) => {
      await makePreviousOutput(d);
      writeFileSync(join(d, 'out', 'analysis.ipynb'), '{}');
    },
    args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'],
    status: 1,
    code: 'RDK_FORCE_REFUSED',
    where: /out: holds 1 entry its manifest does not list: "analysis\.ipynb"/,
  },
  {
    name: '--force on a previous output with an unlisted part',
    files: { 'in.csv': OK_CSV },
    setup: async (d) => {
      await makePreviousOutput(d);
      writeFileSync(join(d, 'out', 'part-00008.csv'), 'id\n1\n');
    },
    args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'],
    status: 1,
    code: 'RDK_FORCE_REFUSED',
    where: /"part-00008\.csv"/,
  },
  { name: '--force on a manifest not written by rowdeck', files: { 'in.csv': OK_CSV, 'out/manifest.json': '{"tool":{"name":"other"},"output":{"parts":[]}}', 'out/part-00000.csv': 'x\n' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /its manifest\.json was not written by rowdeck/ },
  { name: '--force on a manifest that lists a path outside', files: { 'in.csv': OK_CSV, 'out/manifest.json': '{"tool":{"name":"rowdeck"},"output":{"parts":[{"path":"../in.csv"}]}}' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /lists a part outside the folder/ },
  { name: '--force on a damaged manifest', files: { 'in.csv': OK_CSV, 'out/manifest.json': '{"tool":' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--force'], status: 1, code: 'RDK_FORCE_REFUSED', where: /its manifest\.json is not valid JSON/ },
  {
    name: '--out held by a live run (lock file)',
    files: { 'in.csv': OK_CSV },
    setup: (d) => writeFileSync(join(d, '.out.rowdeck-lock'), JSON.stringify({ pid: process.pid, host: hostname(), start: null, startedAt: '2026-01-01T00:00:00.000Z', out: join(d, 'out') })),
    args: () => ['shuffle', 'in.csv', '--out', 'out'],
    status: 1,
    code: 'RDK_OUTPUT_LOCKED',
    where: new RegExp(`out: another rowdeck run is writing this output folder \\(run ${process.pid} on `),
  },
  // ---- names and option values ----
  usage('split name with a parent step (../x)', ['--split', '../x=0.5,b=0.5']),
  usage('split name with a slash (a/b)', ['--split', 'a/b=0.5,b=0.5']),
  usage('split name empty', ['--split', '=0.5,b=0.5']),
  usage('split name "."', ['--split', '.=0.5,b=0.5']),
  usage('split named rejected with quarantine (would overwrite rejected.csv)', ['--split', 'rejected=0.5,kept=0.5', '--on-bad-record', 'quarantine']),
  usage('split named Manifest (any case)', ['--split', 'Manifest=0.5,b=0.5']),
  usage('split named report', ['--split', 'report=0.5,b=0.5']),
  usage('split named manifest.json', ['--split', 'manifest.json=0.5,b=0.5', '--partitions', '2']),
  usage('the same split name twice', ['--split', 'a=0.5,a=0.5']),
  usage('--partitions 0', ['--partitions', '0']),
  usage('--partitions 100001', ['--partitions', '100001']),
  usage('--partitions -3', ['--partitions', '-3']),
  usage('--partitions 1e9', ['--partitions', '1e9']),
  usage('--folds 1', ['--folds', '1']),
  usage('--folds 1000000', ['--folds', '1000000']),
  usage('--memory 1KiB', ['--memory', '1KiB']),
  usage('--memory lots', ['--memory', 'lots']),
  usage('--tolerance -1', ['--tolerance', '-1']),
  usage('--tolerance NaN', ['--tolerance', 'NaN']),
  usage('--threads 100000', ['--threads', '100000']),
  usage('--delimiter of two bytes', ['--delimiter', ';;']),
  usage('--delimiter a quote', ['--delimiter', '"']),
  usage('--format xml', ['--format', 'xml']),
  usage('--on-bad-record maybe', ['--on-bad-record', 'maybe']),
  usage('--assign hash without --key', ['--assign', 'hash']),
  usage('--stratify COL:bins=1', ['--stratify', 'reading:bins=1']),
  usage('an unknown option', ['--shufle'], 'RDK_UNKNOWN_OPTION'),
  { name: 'standard input twice', args: () => ['shuffle', '-', '-', '--out', 'out'], status: 2, code: 'RDK_OPTION' },
  { name: 'no --out', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv'], status: 2, code: 'RDK_MISSING_ARGUMENT' },
  { name: 'an unknown command', args: () => ['shufle', 'in.csv'], status: 2, code: 'RDK_UNKNOWN_COMMAND' },
  // ---- verify ----
  { name: 'verify a folder without a manifest', files: { 'out/part-00000.csv': 'a\n' }, args: () => ['verify', 'out'], status: 1, code: 'RDK_MANIFEST', where: /out\/manifest\.json: no such file/ },
  { name: 'verify a missing folder', args: () => ['verify', 'nowhere'], status: 1, code: 'RDK_MANIFEST', where: 'nowhere: no such folder' },
  { name: 'verify: an unlisted part-like file in the folder', files: { 'in.csv': OK_CSV }, setup: async (d) => { await makePreviousOutput(d); writeFileSync(join(d, 'out', 'part-00008.csv'), 'id\n1\n'); }, args: () => ['verify', 'out'], status: 1, where: /^part-00008\.csv: listed: expected no such file/m },
  {
    name: 'verify --against: the seed in the manifest edited',
    files: { 'in.csv': OK_CSV },
    setup: async (d) => {
      await makePreviousOutput(d, 'north');
      const p = join(d, 'out', 'manifest.json');
      writeFileSync(p, readFileSync(p, 'utf8').replace('"seed": "north"', '"seed": "south"'));
    },
    args: () => ['verify', 'out', '--against', 'prev.csv'],
    status: 1,
    where: /replay failed: the parts or the manifest are not what seed "south"/,
  },
  { name: 'verify: a part that cannot be read', unprivileged: true, files: { 'in.csv': OK_CSV }, setup: async (d) => { await makePreviousOutput(d); chmodSync(join(d, 'out', 'part-00001.csv'), 0o000); }, args: () => ['verify', 'out'], status: 1, where: /^part-00001\.csv: readable: expected records the reader accepts, found part-00001\.csv: opening a part failed: permission denied/m },
  // ---- unusual but valid: accepted, and the output verifies ----
  { name: 'NUL bytes in fields', files: { 'in.csv': 'id,v,c\n1,a\u0000b,x\n2,\u0000,y\n3,c,x\n' }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--stratify', 'c'], status: 0, out: 'out' },
  {
    name: 'two invalid UTF-8 class values stay two classes',
    files: { 'in.csv': Buffer.concat([Buffer.from('id,c\n1,a'), Buffer.from([0xff]), Buffer.from('\n2,a'), Buffer.from([0xfe]), Buffer.from('\n3,"a'), Buffer.from([0xff]), Buffer.from('"\n4,b\n')]) },
    args: () => ['shuffle', 'in.csv', '--out', 'out', '--stratify', 'c', '--tolerance', '100'],
    status: 0,
    out: 'out',
    then: (d) => {
      const m = JSON.parse(readFileSync(join(d, 'out', 'manifest.json'), 'utf8')) as { strata: { values: { value: string[]; records: number }[] } };
      // a\xff twice (plain and quoted), a\xfe once, b once: PEP 383 escapes, not U+FFFD.
      expect(m.strata.values).toEqual([
        { value: ['a\udcfe'], records: 1 },
        { value: ['a\udcff'], records: 2 },
        { value: ['b'], records: 1 },
      ]);
    },
  },
  { name: 'a byte order mark and CRLF', files: { 'in.csv': '\ufeffid,c\r\n1,a\r\n2,b\r\n' }, args: () => ['shuffle', 'in.csv', '--out', 'out'], status: 0, out: 'out' },
  { name: 'a split named like a file but not reserved (rejects)', files: { 'in.csv': OK_CSV }, args: () => ['shuffle', 'in.csv', '--out', 'out', '--split', 'rejects=0.5,kept=0.5'], status: 0, out: 'out' },
];

beforeAll(() => {
  base = mkdtempSync(join(tmpdir(), 'rowdeck-corpus-'));
  // An unprivileged run must be able to reach the case folders.
  chmodSync(base, 0o755);
});
afterAll(() => {
  if (base) {
    // Restore what the cases took away, so the folder can be removed.
    try {
      execFileSync('chmod', ['-R', 'u+rwx', base]);
    } catch {
      // best effort
    }
    rmSync(base, { recursive: true, force: true });
  }
});

const tally = { tried: 0, coded: 0, accepted: 0, leftovers: 0, skipped: 0 };

async function prepare(c: Case, dir: string): Promise<void> {
  for (const [name, content] of Object.entries(c.files ?? {})) {
    const p = join(dir, name);
    mkdirSync(join(p, '..'), { recursive: true });
    if (typeof content === 'string' && content.startsWith('fifo:')) execFileSync('mkfifo', [p]);
    else writeFileSync(p, content);
  }
  await c.setup?.(dir);
}

/** runCli in this process, its output collected. */
async function runHere(argv: string[]): Promise<Run> {
  let stdout = '';
  let stderr = '';
  const status = await runCli(argv, { stdout: { write: (t: string) => ((stdout += t), true) } as unknown as NodeJS.WritableStream, stderr: { write: (t: string) => ((stderr += t), true) } as unknown as NodeJS.WritableStream });
  return { status, signal: null, stdout, stderr };
}

describe('bad inputs and invocations', () => {
  it.concurrent.each(CASES.map((c, i) => [c.name, c, i] as const))('%s', async (_name, c, i) => {
    const dir = join(base, `case-${String(i).padStart(3, '0')}`);
    mkdirSync(dir);
    const registry = join(dir, 'runs-registry');
    if (c.args(dir).some((a) => a.startsWith('/proc/')) && !existsSync('/proc/self')) {
      tally.skipped++;
      console.log(`skipped "${c.name}": this system has no /proc`);
      return;
    }
    if (c.unprivileged && !canDropPrivileges) {
      tally.skipped++;
      console.log(`skipped "${c.name}": ${PERMISSION_SKIP}`);
      return;
    }
    const as = c.unprivileged && nobody ? nobody : undefined;
    if (as) chmodSync(dir, 0o777);
    await prepare(c, dir);
    const before = snapshot(dir, ['runs-registry']);
    const workBefore = workEntries(dir);
    const fifo = Object.entries(c.files ?? {}).find(([, v]) => typeof v === 'string' && v.startsWith('fifo:'));
    const running = c.inProcess ? runHere(c.args(dir)) : runRowdeck(c.args(dir), { cwd: dir, env: { ROWDECK_RUNS_DIR: registry }, ...(c.stdin !== undefined ? { input: c.stdin } : {}), ...(as ? { as } : {}) });
    // A FIFO's writer: opening for writing waits for rowdeck to open it for reading.
    if (fifo) {
      await writeFile(join(dir, fifo[0]), (fifo[1] as string).slice('fifo:'.length));
    }
    const r = await running;
    tally.tried++;
    const label = `${c.name}\nstatus ${r.status}\nstderr: ${r.stderr}`;
    expect(r.stderr, label).not.toContain('internal error');
    expect(r.status, label).toBe(c.status);
    if (c.status !== 0) {
      const e = printedError(r.stderr);
      if (c.code !== undefined) {
        expect(e?.code, label).toBe(c.code);
        tally.coded++;
      } else {
        // verify's failed checks: one line per mismatch and RDK_VERIFY_FAILED in the summary.
        expect(r.stderr, label).toContain('RDK_VERIFY_FAILED');
        tally.coded++;
      }
      if (c.where !== undefined) {
        const text = c.code !== undefined ? e!.message : r.stderr;
        if (typeof c.where === 'string') {
          const at = c.inProcess ? join(dir, c.where) : c.where;
          expect(text.startsWith(at) || (c.where.startsWith('/') && text.includes(c.where)), `${label}\nwanted: ${at}`).toBe(true);
        }
        else expect(text, label).toMatch(c.where);
      }
    } else tally.accepted++;
    // Nothing left behind: the folder is as it was (a successful run adds exactly its output).
    const after = snapshot(dir, ['runs-registry', ...(c.status === 0 && c.out ? [c.out] : [])]);
    const changed = diffSnapshots(before, after);
    const work = workEntries(dir).filter((w) => !workBefore.includes(w));
    let registryLeft: string[] = [];
    try {
      registryLeft = readdirSync(registry);
    } catch {
      registryLeft = [];
    }
    tally.leftovers += changed.length + work.length + registryLeft.length;
    expect(changed, `${label}\nchanged entries`).toEqual([]);
    expect(work, `${label}\nwork entries`).toEqual([]);
    expect(registryLeft, `${label}\nrun records`).toEqual([]);
    if (c.status === 0 && c.out) {
      const v = await verify({ dir: join(dir, c.out) });
      expect(v.mismatches).toEqual([]);
      c.then?.(dir, r);
    }
  });

  afterAll(() => {
    // The figures for the closing note: every case counted once.
    console.log(`safety corpus: ${tally.tried} run, ${tally.coded} coded errors, ${tally.accepted} accepted and verified, ${tally.skipped} skipped, ${tally.leftovers} leftovers`);
    expect(tally.leftovers).toBe(0);
  });

  it('holds at least 60 cases', () => {
    expect(CASES.length).toBeGreaterThanOrEqual(60);
  });
});
