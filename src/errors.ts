/**
 * One error class for everything rowdeck reports on purpose. Callers match on `code`
 * (stable, documented in docs/errors.md), never on the message text.
 *
 * Errors lose their class when they cross a worker boundary (structured clone keeps only
 * `message`), so workers send `toWire(err)` and the main thread rebuilds with `fromWire()`.
 */

/** Usage errors: the command line or the options are wrong. The CLI exits 2. */
export const USAGE_CODES = [
  'ERR_OPTION',
  'ERR_UNKNOWN_OPTION',
  'ERR_MISSING_ARGUMENT',
  'ERR_UNKNOWN_COMMAND',
] as const;

/** Data and environment errors: the inputs or outputs are not as they must be. The CLI exits 1. */
export const DATA_CODES = [
  'ERR_INPUT_NOT_FOUND',
  'ERR_INPUT_EMPTY',
  'ERR_HEADER_ONLY',
  'ERR_HEADER_MISMATCH',
  'ERR_DUPLICATE_HEADER',
  'ERR_UNKNOWN_COLUMN',
  'ERR_FIELD_COUNT',
  'ERR_UNTERMINATED_QUOTE',
  'ERR_STRAY_QUOTE',
  'ERR_INVALID_JSON',
  'ERR_NOT_NUMERIC',
  'ERR_TOLERANCE',
  'ERR_SPLIT_SIZES',
  'ERR_OUTPUT_EXISTS',
  'ERR_MANIFEST',
  'ERR_VERIFY_FAILED',
  'ERR_IO',
  'ERR_INTERNAL',
] as const;

export type RowdeckErrorCode = (typeof USAGE_CODES)[number] | (typeof DATA_CODES)[number];

/** Where in the input a data error was found. Line and column numbers are 1-based. */
export interface ErrorDetails {
  /** Input path as the user gave it; `<stdin>` for `-`. */
  file?: string;
  /** Physical line number, as an editor shows it (not the record number). */
  line?: number;
  /** 1-based field position, or the field name where one is known. */
  column?: number | string;
  [key: string]: unknown;
}

export class RowdeckError extends Error {
  override readonly name = 'RowdeckError';
  readonly code: RowdeckErrorCode;
  readonly details: ErrorDetails;

  constructor(code: RowdeckErrorCode, message: string, details: ErrorDetails = {}) {
    super(message);
    this.code = code;
    this.details = details;
  }

  /** True for mistakes on the command line or in options (exit 2), false for data errors (exit 1). */
  get isUsage(): boolean {
    return (USAGE_CODES as readonly string[]).includes(this.code);
  }
}

/** The plain-data form of an error, safe to post between threads. */
export interface WireError {
  code: RowdeckErrorCode;
  message: string;
  details: ErrorDetails;
}

export function toWire(err: unknown): WireError {
  if (err instanceof RowdeckError) return { code: err.code, message: err.message, details: err.details };
  const e = err instanceof Error ? err : new Error(String(err));
  const sys = (e as NodeJS.ErrnoException).code;
  return { code: sys ? 'ERR_IO' : 'ERR_INTERNAL', message: e.message, details: sys ? { errno: sys } : { stack: e.stack } };
}

export function fromWire(w: WireError): RowdeckError {
  return new RowdeckError(w.code, w.message, w.details);
}

/** Wraps a Node system error (ENOENT, EACCES, ENOSPC …) into a coded error naming the path. */
export function ioError(err: unknown, path: string, doing: string): RowdeckError {
  if (err instanceof RowdeckError) return err;
  const e = err as NodeJS.ErrnoException;
  if (e?.code === 'ENOENT') {
    return new RowdeckError('ERR_INPUT_NOT_FOUND', `${path}: no such file. Check the path (it is relative to ${process.cwd()}).`, { file: path });
  }
  return new RowdeckError('ERR_IO', `${path}: ${doing} failed: ${e?.message ?? String(err)}`, { file: path, errno: e?.code });
}

/** `file:line:column` prefix used by every data error message. */
export function where(file: string | undefined, line?: number, column?: number | string): string {
  let s = file ?? '<input>';
  if (line !== undefined) s += `:${line}`;
  if (column !== undefined) s += typeof column === 'number' ? `:${column}` : ` (column "${column}")`;
  return s;
}
