/**
 * The format of a run's inputs, decided before any is read: by `--format` when given; else by
 * each input's name (.csv .tsv .tab .jsonl .ndjson, optionally .gz), checked against its first
 * bytes; else (standard input, other names) by its first bytes alone: a JSON object is JSON
 * Lines, a first line with tabs and no commas TSV, anything else CSV. Gzip is looked into (its
 * first bytes decompressed). What cannot be read is said before the reader meets it, with the
 * likely cause and what to do: inputs of different formats, a `.gz` that is not gzip, data
 * compressed by another tool, UTF-16 text, a CSV-named file of JSON objects.
 *
 * Standard input is read ahead for this and its bytes kept: `openInput('-')` takes them first
 * (takePeekedStdin), so nothing is lost.
 */
import { closeSync, openSync, readSync, statSync } from 'node:fs';
import { constants as zlib, gunzipSync } from 'node:zlib';
import { RowdeckError } from '../errors.js';
import type { InputFormat } from './batch.js';

/** Bytes looked at (before decompression). */
const HEAD_BYTES = 64 * 1024;

const FORMAT_NAMES: Record<InputFormat, string> = { csv: 'CSV', tsv: 'TSV', jsonl: 'JSON Lines' };

/** The format a file name gives, or null. */
export function formatFromName(path: string): InputFormat | null {
  const name = path.toLowerCase().replace(/\.gz$/, '');
  if (name.endsWith('.csv')) return 'csv';
  if (name.endsWith('.tsv') || name.endsWith('.tab')) return 'tsv';
  if (name.endsWith('.jsonl') || name.endsWith('.ndjson')) return 'jsonl';
  return null;
}

// --- standard input, read ahead ------------------------------------------------------------------

interface PeekedStdin {
  chunks: Buffer[];
  done: boolean;
  it: AsyncIterator<Buffer | string>;
}

let peeked: PeekedStdin | null = null;

/**
 * The first bytes of standard input, kept for openInput: up to `want`, or less once they hold a
 * first line (plain text; gzip is read on to `want` or its end), so a slow writer is not waited
 * for longer than its first line.
 */
async function peekStdin(want: number): Promise<Buffer> {
  if (!peeked) peeked = { chunks: [], done: false, it: process.stdin[Symbol.asyncIterator]() as AsyncIterator<Buffer | string> };
  let have = peeked.chunks.reduce((a, b) => a + b.length, 0);
  const enough = (): boolean => {
    if (have >= want) return true;
    const head = Buffer.concat(peeked!.chunks);
    if (head.length < 2 || isGzip(head)) return false;
    const start = head.findIndex((b) => b !== 0x0a && b !== 0x0d && b !== 0x20 && b !== 0x09);
    return start >= 0 && head.indexOf(0x0a, start) >= 0;
  };
  while (!peeked.done && !enough()) {
    const r = await peeked.it.next();
    if (r.done) {
      peeked.done = true;
      break;
    }
    const b = typeof r.value === 'string' ? Buffer.from(r.value) : r.value;
    peeked.chunks.push(b);
    have += b.length;
  }
  return Buffer.concat(peeked.chunks);
}

/** Standard input's bytes read ahead and the iterator to go on with, once; null when nothing was read ahead. */
export function takePeekedStdin(): PeekedStdin | null {
  const p = peeked;
  peeked = null;
  return p;
}

// --- what the first bytes say --------------------------------------------------------------------

/** Magic numbers of compressed or archive formats rowdeck does not read. */
const OTHER_COMPRESSION: { name: string; magic: number[]; undo: string }[] = [
  { name: 'zstd', magic: [0x28, 0xb5, 0x2f, 0xfd], undo: 'zstd -dc' },
  { name: 'xz', magic: [0xfd, 0x37, 0x7a, 0x58, 0x5a, 0x00], undo: 'xz -dc' },
  { name: 'bzip2', magic: [0x42, 0x5a, 0x68], undo: 'bzip2 -dc' },
  { name: 'zip', magic: [0x50, 0x4b, 0x03, 0x04], undo: 'unzip -p' },
  { name: '7-Zip', magic: [0x37, 0x7a, 0xbc, 0xaf, 0x27, 0x1c], undo: '7z x -so' },
  { name: 'lz4', magic: [0x04, 0x22, 0x4d, 0x18], undo: 'lz4 -dc' },
];

function startsWith(b: Buffer, magic: number[]): boolean {
  return b.length >= magic.length && magic.every((x, i) => b[i] === x);
}

function isGzip(b: Buffer): boolean {
  return b.length >= 2 && b[0] === 0x1f && b[1] === 0x8b;
}

/** What the content (after any gzip) looks like: a format, or null when there is nothing to go by. */
export function sniffContent(b: Buffer): { format: InputFormat; firstLineIsObject: boolean } | null {
  let i = b.length >= 3 && b[0] === 0xef && b[1] === 0xbb && b[2] === 0xbf ? 3 : 0;
  while (i < b.length && (b[i] === 0x20 || b[i] === 0x09 || b[i] === 0x0a || b[i] === 0x0d)) i++;
  if (i >= b.length) return null;
  const lineEnd = b.indexOf(0x0a, i);
  const line = b.subarray(i, lineEnd < 0 ? b.length : lineEnd).toString('utf8').replace(/\r$/, '');
  if (b[i] === 0x7b) {
    let firstLineIsObject = false;
    try {
      const v: unknown = JSON.parse(line);
      firstLineIsObject = typeof v === 'object' && v !== null && !Array.isArray(v);
    } catch {
      // Cut off by the end of the head, or not JSON.
    }
    // A line cut by the end of the head counts as an object: it began like one.
    return { format: 'jsonl', firstLineIsObject: firstLineIsObject || lineEnd < 0 };
  }
  // Delimiters of the first line outside quotes.
  let tabs = 0;
  let commas = 0;
  let quoted = false;
  for (const ch of line) {
    if (ch === '"') quoted = !quoted;
    else if (!quoted && ch === '\t') tabs++;
    else if (!quoted && ch === ',') commas++;
  }
  return { format: tabs > 0 && commas === 0 ? 'tsv' : 'csv', firstLineIsObject: false };
}

/** The first bytes of a regular file, or null for streams other than standard input (they cannot be looked into without taking their bytes). */
async function readHead(path: string): Promise<Buffer | null> {
  if (path === '-') return peekStdin(HEAD_BYTES);
  let fd = -1;
  try {
    if (!statSync(path).isFile()) return null;
    fd = openSync(path, 'r');
    const head = Buffer.alloc(HEAD_BYTES);
    return head.subarray(0, readSync(fd, head, 0, HEAD_BYTES, 0));
  } catch {
    return null; // the read that follows reports it, with its path
  } finally {
    if (fd >= 0) closeSync(fd);
  }
}

function formatError(message: string, file: string): RowdeckError {
  return new RowdeckError('RDK_INPUT_FORMAT', message, { file });
}

/** What is known of one input: its format, and how it was decided. */
interface InputKind {
  path: string;
  shown: string;
  format: InputFormat | null;
  by: 'name' | 'content' | 'nothing';
}

/**
 * Looks at one input's first bytes: refuses what rowdeck cannot read, and gives its format (the
 * name's, checked against the content, or the content's).
 */
async function inspect(path: string, explicit: InputFormat | null, option: (value: string) => string, command: string): Promise<InputKind> {
  const shown = path === '-' ? '<stdin>' : path;
  const byName = path === '-' ? null : formatFromName(path);
  const head = await readHead(path);
  if (head === null) return { path, shown, format: byName, by: byName ? 'name' : 'nothing' };
  for (const c of OTHER_COMPRESSION) {
    if (startsWith(head, c.magic) && (c.name !== 'bzip2' || (head[3]! >= 0x31 && head[3]! <= 0x39))) {
      throw formatError(
        `${shown}: ${c.name}-compressed data, which rowdeck does not read (it reads plain text and gzip). Decompress it first, e.g. ${c.undo} ${path === '-' ? 'FILE' : path} | rowdeck ${command} - ${option(byName ?? 'csv')} ….`,
        shown,
      );
    }
  }
  if (startsWith(head, [0xff, 0xfe]) || startsWith(head, [0xfe, 0xff])) {
    throw formatError(`${shown}: UTF-16 text (it starts with a UTF-16 byte order mark); rowdeck reads UTF-8. Convert it first, e.g. iconv -f UTF-16 -t UTF-8 ${path === '-' ? 'FILE' : path} > converted${byName ? `.${byName}` : '.csv'}.`, shown);
  }
  let content = head;
  if (isGzip(head)) {
    try {
      content = gunzipSync(head, { finishFlush: zlib.Z_SYNC_FLUSH });
    } catch {
      // Damaged gzip data: the reader says so, with the zlib error.
      return { path, shown, format: byName, by: byName ? 'name' : 'nothing' };
    }
  } else if (path !== '-' && /\.gz$/i.test(path) && head.length > 0 && head.subarray(0, 4096).includes(0)) {
    throw formatError(
      `${shown}: named .gz but not gzip data (it does not start with the gzip bytes 1f 8b) nor text: it is damaged, or compressed with another tool. Decompress it with that tool and pass the result on standard input (… | rowdeck ${command} - ${option(byName ?? 'csv')} …).`,
      shown,
    );
  }
  const sniffed = sniffContent(content);
  if (byName !== null) {
    if (explicit === null && sniffed?.format === 'jsonl' && sniffed.firstLineIsObject && byName !== 'jsonl') {
      throw formatError(
        `${shown}: its first line is a JSON object: it looks like JSON Lines, not ${FORMAT_NAMES[byName]} as its name says. Pass ${option('jsonl')} if it is (or name it .jsonl).`,
        shown,
      );
    }
    return { path, shown, format: byName, by: 'name' };
  }
  return sniffed ? { path, shown, format: sniffed.format, by: 'content' } : { path, shown, format: null, by: 'nothing' };
}

/**
 * The one format of a run's inputs. `explicit` (--format) is taken as it is, after the checks
 * of what no format can read; otherwise every input must come out the same.
 * `option(value)` spells the format option with a value, as the caller writes it; `command`
 * names the command in suggested command lines.
 */
export async function chooseFormat(inputs: readonly string[], explicit: InputFormat | null, option: (value: string) => string, command = 'shuffle'): Promise<InputFormat> {
  const got = await chooseFormats(inputs, explicit, option, command, false);
  return got!;
}

/**
 * As chooseFormat, for a command that reads each input in its own format (profile): inputs whose
 * names all say a format may differ (null: each by its name); the format is still one where any
 * is told by its bytes, since only names are known to every reader.
 */
export async function chooseFormats(
  inputs: readonly string[],
  explicit: InputFormat | null,
  option: (value: string) => string,
  command: string,
  mixedByName: boolean,
): Promise<InputFormat | null> {
  const kinds: InputKind[] = [];
  for (const path of inputs) kinds.push(await inspect(path, explicit, explicit !== null ? () => option(explicit) : option, command));
  if (explicit !== null) return explicit;
  const known = kinds.filter((k) => k.format !== null);
  const unknown = kinds.find((k) => k.format === null && k.path !== '-' && isStream(k.path));
  if (unknown) {
    throw new RowdeckError(
      'RDK_OPTION',
      `Cannot tell the format of "${unknown.path}": its name is not .csv, .tsv, .jsonl or .ndjson (optionally .gz), and it is not a file whose first bytes can be looked at. Pass ${option('csv|tsv|jsonl')}.`,
      { file: unknown.path, option: 'format' },
    );
  }
  const first = known[0];
  if (!first) return 'csv'; // nothing to read: the reader says so
  const other = known.find((k) => k.format !== first.format);
  if (other && mixedByName && kinds.every((k) => k.by === 'name')) return null;
  if (other) {
    const how = (k: InputKind): string => `${k.shown} is ${FORMAT_NAMES[k.format!]} (${k.by === 'name' ? 'by its name' : 'by its first bytes'})`;
    throw formatError(
      `the inputs are not all of one format: ${how(first)}, ${how(other)}. A run reads one format: convert them to one first, or give them to separate runs (${option(first.format!)} reads every input as ${FORMAT_NAMES[first.format!]}).`,
      other.shown,
    );
  }
  return first.format!;
}

/** A pipe or device: there is no looking at its first bytes without taking them. */
function isStream(path: string): boolean {
  try {
    return !statSync(path).isFile();
  } catch {
    return false; // the read that follows reports it
  }
}
