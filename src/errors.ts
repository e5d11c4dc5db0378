/**
 * One error class for everything rowdeck reports on purpose. Callers match on `code`
 * (stable, documented in docs/errors.md), never on the message text.
 *
 * Errors lose their class when they cross a worker boundary (structured clone keeps only
 * `message`), so workers send `toWire(err)` and the main thread rebuilds with `fromWire()`.
 */

import { describeOperation, describeSystemError, pathOfSystemError } from './io/os-errors.js';

/** Usage errors: the command line or the options are wrong. The CLI exits 2. */
export const USAGE_CODES = [
  'RDK_OPTION',
  'RDK_UNKNOWN_OPTION',
  'RDK_MISSING_ARGUMENT',
  'RDK_UNKNOWN_COMMAND',
] as const;

/** Data and environment errors: the inputs or outputs are not as they must be. The CLI exits 1. */
export const DATA_CODES = [
  'RDK_INPUT_NOT_FOUND',
  'RDK_INPUT_EMPTY',
  'RDK_INPUT_FORMAT',
  'RDK_HEADER_ONLY',
  'RDK_HEADER_MISMATCH',
  'RDK_DUPLICATE_HEADER',
  'RDK_UNKNOWN_COLUMN',
  'RDK_FIELD_COUNT',
  'RDK_UNTERMINATED_QUOTE',
  'RDK_STRAY_QUOTE',
  'RDK_INVALID_JSON',
  'RDK_NOT_NUMERIC',
  'RDK_TOLERANCE',
  'RDK_SPLIT_SIZES',
  'RDK_OUTPUT_EXISTS',
  'RDK_OUTPUT_LOCKED',
  'RDK_FORCE_REFUSED',
  'RDK_FIELD_TOO_LONG',
  'RDK_MANIFEST',
  'RDK_VERIFY_FAILED',
  'RDK_IO',
  'RDK_PERMISSION',
  'RDK_DISK_FULL',
  'RDK_NO_SPACE',
  'RDK_TOO_MANY_OPEN_FILES',
  'RDK_PLAN',
  'RDK_INPUT_CHANGED',
  'RDK_TASKS_INCOMPLETE',
  'RDK_INTERNAL',
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
  // An operating-system error keeps its meaning (and its path) across the boundary.
  const sys = describeSystemError(err);
  if (sys) {
    const e = systemError(err, pathOfSystemError(err) ?? '(unknown path)', describeOperation(err, 'working on'));
    return { code: e.code, message: e.message, details: e.details };
  }
  const e = err instanceof Error ? err : new Error(String(err));
  return { code: 'RDK_INTERNAL', message: e.message, details: { stack: e.stack } };
}

export function fromWire(w: WireError): RowdeckError {
  return new RowdeckError(w.code, w.message, w.details);
}

/**
 * Wraps a Node system error met while reading an input (ENOENT, EACCES …) into a coded error
 * naming the path: a missing input is RDK_INPUT_NOT_FOUND, anything else as `systemError`.
 * `doing` names the operation ("reading", "creating a spill file" …); only "opening"/"reading"
 * (an input) turn ENOENT into RDK_INPUT_NOT_FOUND.
 */
export function ioError(err: unknown, path: string, doing: string): RowdeckError {
  if (err instanceof RowdeckError) return err;
  const e = err as NodeJS.ErrnoException;
  if (e?.code === 'ENOENT' && (doing === 'opening' || doing === 'reading')) {
    return new RowdeckError('RDK_INPUT_NOT_FOUND', `${path}: no such file. Check the path (it is relative to ${process.cwd()}).`, { file: path });
  }
  return systemError(err, path, doing);
}

/**
 * Any operating-system failure as a coded error: `path: <operation> failed: <reason>. <what to
 * do>`, with the errno, the operation and the reason in `details`. Not a system error (no errno):
 * RDK_IO with the error's message.
 */
export function systemError(err: unknown, path: string, operation: string): RowdeckError {
  if (err instanceof RowdeckError) return err;
  const m = describeSystemError(err);
  if (!m) {
    const text = err instanceof Error ? err.message : String(err);
    return new RowdeckError('RDK_IO', `${path}: ${operation} failed: ${text}`, { file: path, operation });
  }
  // A rename names both ends: say the other one where it is not the path given.
  const sys = (err as NodeJS.ErrnoException).syscall;
  const other = pathOfSystemError(err);
  const also = (sys === 'rename' || sys === 'link' || sys === 'copyfile') && other !== undefined && other !== path ? ` (from ${other})` : '';
  return new RowdeckError(m.code, `${path}${also}: ${operation} failed: ${m.reason}. ${m.hint}`, { file: path, operation, errno: m.errno, reason: m.reason });
}

/**
 * A thrown value as a coded error where it is an operating-system failure (the path and the
 * operation taken from the error itself); anything else unchanged.
 */
export function codedSystemError(err: unknown, fallbackOperation = 'working on'): unknown {
  if (err instanceof RowdeckError || !describeSystemError(err)) return err;
  return systemError(err, pathOfSystemError(err) ?? '(unknown path)', describeOperation(err, fallbackOperation));
}

/** `file:line:column` prefix used by every data error message. */
export function where(file: string | undefined, line?: number, column?: number | string): string {
  let s = file ?? '<input>';
  if (line !== undefined) s += `:${line}`;
  if (column !== undefined) s += typeof column === 'number' ? `:${column}` : ` (column "${column}")`;
  return s;
}
