/**
 * The machinery every command's option table is built from. One table per command (shuffle,
 * profile, verify, report) lists each option once: how the library names it, how the command
 * line spells it, its help text, and the one check its value goes through. From the table come
 * the command line's parser (src/cli/args.ts), the option list of `--help`, the library's
 * validation (unknown keys refused, with a "did you mean"), and every message about an option,
 * spelled as the caller wrote it: `--on-bad-record` on the command line, `"onBadRecord"` in the
 * library. The library's option types are checked against the tables at compile time (each
 * table `satisfies` its interface, key for key).
 *
 * Messages follow one pattern: `Invalid option --name: expected …, got …` (command line) or
 * `Invalid option "name": expected …, got …` (library), with code RDK_OPTION.
 */
import { RowdeckError } from '../errors.js';

/** Who passed the options: the command line (flags) or a program (the library's keys). */
export type Surface = 'cli' | 'library';

/** How an option is given on the command line, if at all. */
export type CliForm =
  /** `--flag` (a switch) or `--flag ARG`; `negated`: the flag sets the option to false (`--no-header`). */
  | { flag: string; arg?: string; negated?: boolean; multiple?: boolean }
  /** Positional arguments, shown as NAME in usage and messages; `many`: one or more. */
  | { positional: string; many: boolean }
  /** The library's only (callbacks). */
  | null;

/** What a check can say about a value: spelled for the surface the options came from. */
export interface Checker {
  readonly surface: Surface;
  /** The key of the option being checked. */
  readonly key: string;
  /** Throws RDK_OPTION: `Invalid option <name>: expected <expected>, got <got>`. */
  fail(expected: string, got: unknown): never;
  /** Throws RDK_OPTION: `Invalid option <name>: <message>` (where "expected …, got …" says too little). */
  reject(message: string): never;
  /** Another option's name as the caller spells it. */
  name(key: string): string;
  /** An option with a value as the caller writes it: `--assign hash` or `assign: "hash"`. */
  setting(key: string, value: string): string;
}

export interface OptionDef<V> {
  cli: CliForm;
  /** The section of --help it is listed under. */
  section?: string;
  /** Its --help text, line by line (wrapped at 66 columns). */
  help?: readonly string[];
  /** A required option: what it is, for the message when it is missing. */
  required?: string;
  /** Checks a value the caller gave (never undefined) and returns it as the engine takes it. */
  check(v: unknown, c: Checker): V;
  /** Command line only: the text after the flag as the library's value (before `check`). */
  fromText?(s: string, c: Checker): unknown;
  /** Whether text is a value of the right type (a string given to a number option is named as such). */
  text?: boolean;
}

/** A command's table: one entry per library option, keyed by the library's name. */
export type OptionTable = Record<string, OptionDef<unknown>>;

/**
 * Options of the command line alone (--json, --quiet, --html, --help): not passed to the library.
 * Their values are text or true.
 */
export interface CliOnlyDef {
  flag: string;
  arg?: string;
  short?: string;
  section: string;
  help: readonly string[];
}

/**
 * A command's options: its table, and (a type only) `O`, the options object the library takes,
 * which the table is checked against where it is declared (`satisfies`). The command line's
 * parser and `readOptions` give their values as `O`'s.
 */
export interface CommandSpec<O = unknown> {
  /** Never set: carries the type of the options object. */
  readonly options?: O;
  /** `shuffle`: `rowdeck shuffle` on the command line, `shuffle()` in the library. */
  command: string;
  /** The library function's name where it differs from the command's (`writeReport`). */
  libraryName?: string;
  table: OptionTable;
  cliOnly: Record<string, CliOnlyDef>;
}

/** The option's name in messages. */
export function spellOption(surface: Surface, table: OptionTable, key: string): string {
  if (surface === 'library') return `"${key}"`;
  const cli = table[key]?.cli;
  if (cli && 'flag' in cli) return `--${cli.flag}`;
  if (cli && 'positional' in cli) return cli.positional;
  return `--${kebab(key)}`;
}

/**
 * An option's name as a caller of `surface` spells it, for messages outside the resolvers
 * (the run's own errors name --tolerance, --split, --fold-column …): the command line's flags are
 * the library's keys in kebab case.
 */
export function optionName(surface: Surface, key: string): string {
  return surface === 'library' ? `"${key}"` : `--${kebab(key)}`;
}

/** An option with a value, as the caller would write it: `--format jsonl` or `format: "jsonl"` (numbers bare: `tolerance: 0.6`). */
export function optionSetting(surface: Surface, key: string, value: string): string {
  if (surface === 'cli') return `--${kebab(key)} ${value}`;
  return `${key}: ${/^-?\d+(?:\.\d+)?$/.test(value) ? value : JSON.stringify(value)}`;
}

/** `onBadRecord` -> `on-bad-record`. */
export function kebab(key: string): string {
  return key.replace(/[A-Z]/g, (c) => `-${c.toLowerCase()}`);
}

/** How a value the caller gave is shown in a message. */
export function showGot(v: unknown, surface: Surface, wantText = false): string {
  if (v === undefined) return 'nothing';
  if (typeof v === 'string') return surface === 'cli' || wantText ? JSON.stringify(v) : `${JSON.stringify(v)} (a string)`;
  if (typeof v === 'function') return 'a function';
  if (typeof v === 'number' || typeof v === 'boolean' || v === null || typeof v === 'bigint') return String(v);
  // On the command line a list is the arguments as typed.
  if (surface === 'cli' && Array.isArray(v) && v.every((x) => typeof x === 'string')) return v.map((x: string) => JSON.stringify(x)).join(' ');
  let text: string;
  try {
    text = JSON.stringify(v) ?? String(v);
  } catch {
    text = Array.isArray(v) ? 'an array' : 'an object';
  }
  return text.length > 80 ? `${text.slice(0, 77)}...` : text;
}

export function optionError(surface: Surface, table: OptionTable, key: string, expected: string, got: unknown, wantText = false): RowdeckError {
  const cli = table[key]?.cli;
  const what = surface === 'cli' && cli && 'positional' in cli ? 'argument' : 'option';
  return new RowdeckError('RDK_OPTION', `Invalid ${what} ${spellOption(surface, table, key)}: expected ${expected}, got ${showGot(got, surface, wantText)}`, { option: key });
}

/** The checker of option `key` of a table, for messages spelled for `surface`. */
export function checkerFor(surface: Surface, table: OptionTable, key: string, wantText = table[key]?.text === true): Checker {
  return {
    surface,
    key,
    fail: (expected, got) => {
      throw optionError(surface, table, key, expected, got, wantText);
    },
    reject: (message) => {
      throw new RowdeckError('RDK_OPTION', `Invalid option ${spellOption(surface, table, key)}: ${message}`, { option: key });
    },
    name: (k) => spellOption(surface, table, k),
    setting: (k, value) => (surface === 'cli' ? `${spellOption(surface, table, k)} ${value}` : `${k}: ${JSON.stringify(value)}`),
  };
}

/** The command as the caller knows it: `rowdeck shuffle` or `shuffle()`. */
export function commandName(spec: CommandSpec, surface: Surface): string {
  return surface === 'cli' ? `rowdeck ${spec.command}` : `${spec.libraryName ?? spec.command}()`;
}

// --- the surface an options object came from ------------------------------------------------------

const FROM_CLI = Symbol('rowdeck.fromCommandLine');

/** Marks options built by the command line, so every message about them names flags. */
export function fromCommandLine<T extends object>(o: T): T {
  Object.defineProperty(o, FROM_CLI, { value: true, enumerable: false });
  return o;
}

export function surfaceOf(o: unknown): Surface {
  return typeof o === 'object' && o !== null && (o as Record<symbol, unknown>)[FROM_CLI] === true ? 'cli' : 'library';
}

// --- reading an options object against a table ----------------------------------------------------

/**
 * Checks an options object against the command's table: an object; no key the table does not
 * know (RDK_UNKNOWN_OPTION, with the closest name); every required key there (RDK_MISSING_ARGUMENT);
 * each value given through its option's check. Returns the checked values (absent ones left out).
 */
export function readOptions<O>(spec: CommandSpec<O>, o: unknown, surface: Surface = surfaceOf(o), positional: readonly string[] = []): Partial<O> {
  const { table } = spec;
  if (typeof o !== 'object' || o === null || Array.isArray(o)) {
    throw new RowdeckError('RDK_OPTION', `Invalid options of ${commandName(spec, surface)}: expected an object, got ${showGot(o, surface)}`, { option: null });
  }
  const given = o as Record<string, unknown>;
  for (const key of Object.keys(given)) {
    if (!Object.hasOwn(table, key)) throw unknownOption(spec, key, surface, positional);
  }
  const out: Record<string, unknown> = {};
  for (const [key, def] of Object.entries(table)) {
    const v = given[key];
    if (v === undefined) {
      if (def.required !== undefined) throw missingOption(spec, key, surface);
      continue;
    }
    out[key] = def.check(v, checkerFor(surface, table, key));
  }
  // Each key is the table's, its value what that option's check returns: the table satisfies O key for key.
  return out as Partial<O>;
}

export function missingOption(spec: CommandSpec, key: string, surface: Surface): RowdeckError {
  const def = spec.table[key]!;
  const cli = def.cli;
  const shown = surface === 'cli' && cli && 'flag' in cli ? `--${cli.flag}${cli.arg ? ` ${cli.arg}` : ''}` : spellOption(surface, spec.table, key);
  const article = surface === 'cli' && cli && 'positional' in cli ? (cli.many ? 'at least one ' : '') : '';
  return new RowdeckError('RDK_MISSING_ARGUMENT', `${commandName(spec, surface)} needs ${article}${shown}, ${def.required}.`, { option: key });
}

/**
 * An option the command does not take, with the closest one where there is one that close;
 * otherwise the command line points to --help and the library lists its keys.
 * `exclude`: keys that are not options in the library (writeReport's folder is its first argument).
 */
export function unknownOption(spec: CommandSpec, key: string, surface: Surface, exclude: readonly string[] = []): RowdeckError {
  const known = surface === 'cli' ? cliFlags(spec) : Object.keys(spec.table).filter((k) => !exclude.includes(k));
  const typed = surface === 'cli' ? key.replace(/^-+/, '') : key;
  const near = closest(typed, known);
  const shown = surface === 'cli' ? key : `"${key}"`;
  const name = commandName(spec, surface);
  const hint = near !== null ? ` Did you mean ${surface === 'cli' ? `--${near}` : `"${near}"`}?` : surface === 'library' ? ` It takes: ${known.join(', ')}.` : '';
  const help = surface === 'cli' ? ` See ${name} --help.` : '';
  return new RowdeckError('RDK_UNKNOWN_OPTION', `Unknown option ${shown} for ${name}.${hint}${help}`, { option: key, ...(near !== null ? { suggestion: near } : {}) });
}

/** Every flag of a command (without the dashes), library options first. */
export function cliFlags(spec: CommandSpec): string[] {
  const flags: string[] = [];
  for (const def of Object.values(spec.table)) if (def.cli && 'flag' in def.cli) flags.push(def.cli.flag);
  for (const def of Object.values(spec.cliOnly)) flags.push(def.flag);
  return flags;
}

/**
 * The candidate closest to `word` by edit distance (insertions, deletions, substitutions and
 * swaps of neighbours, each costing 1), if it is close enough to be a slip: at most a third of
 * the word's length, and at least 1. Case is ignored.
 */
export function closest(word: string, candidates: readonly string[]): string | null {
  const w = word.toLowerCase();
  let best: string | null = null;
  let bestD = Infinity;
  for (const c of candidates) {
    const d = editDistance(w, c.toLowerCase());
    if (d < bestD) {
      best = c;
      bestD = d;
    }
  }
  const allowed = Math.max(1, Math.floor(word.length / 3));
  return best !== null && bestD <= allowed ? best : null;
}

/** Optimal string alignment distance (Damerau-Levenshtein without repeated edits of a substring). */
export function editDistance(a: string, b: string): number {
  const rows = a.length + 1;
  const cols = b.length + 1;
  const d: number[] = new Array<number>(rows * cols).fill(0);
  for (let i = 0; i < rows; i++) d[i * cols] = i;
  for (let j = 0; j < cols; j++) d[j] = j;
  for (let i = 1; i < rows; i++) {
    for (let j = 1; j < cols; j++) {
      const cost = a[i - 1] === b[j - 1] ? 0 : 1;
      let v = Math.min(d[(i - 1) * cols + j]! + 1, d[i * cols + j - 1]! + 1, d[(i - 1) * cols + j - 1]! + cost);
      if (i > 1 && j > 1 && a[i - 1] === b[j - 2] && a[i - 2] === b[j - 1]) v = Math.min(v, d[(i - 2) * cols + j - 2]! + 1);
      d[i * cols + j] = v;
    }
  }
  return d[rows * cols - 1]!;
}

// --- kinds of values ------------------------------------------------------------------------------

type Kind<V> = Pick<OptionDef<V>, 'check' | 'fromText' | 'text'>;

/** A whole number in [min, max]. From the command line: digits only. */
export function integerValue(min: number, max: number): Kind<number> {
  const expected = `an integer from ${min} to ${max}`;
  return {
    check: (v, c) => (typeof v === 'number' && Number.isInteger(v) && v >= min && v <= max ? v : c.fail(expected, v)),
    fromText: (s, c) => (/^\s*[+-]?\d+\s*$/.test(s) ? Number(s) : c.fail(expected, s)),
  };
}

/** A finite number ≥ min. From the command line: a decimal number. */
export function numberValue(min: number, expected: string): Kind<number> {
  return {
    check: (v, c) => (typeof v === 'number' && Number.isFinite(v) && v >= min ? v : c.fail(expected, v)),
    fromText: (s, c) => (/^\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*$/.test(s) ? Number(s) : c.fail(expected, s)),
  };
}

/** Text; `nonEmpty`: at least one character. */
export function textValue(expected: string, nonEmpty = true): Kind<string> {
  return {
    text: true,
    check: (v, c) => (typeof v === 'string' && (!nonEmpty || v.length > 0) ? v : c.fail(expected, v)),
  };
}

/** One of a few words. */
export function choiceValue<T extends string>(values: readonly T[]): Kind<T> {
  const expected = listWords(values.map((x) => `"${x}"`), 'or');
  return {
    text: true,
    check: (v, c) => (typeof v === 'string' && (values as readonly string[]).includes(v) ? (v as T) : c.fail(expected, v)),
  };
}

/** true or false; on the command line a switch. */
export function booleanValue(): Kind<boolean> {
  return {
    check: (v, c) => (typeof v === 'boolean' ? v : c.fail('true or false', v)),
  };
}

/** A function (callbacks: the library's only). */
export function functionValue<F>(): Kind<F> {
  return {
    check: (v, c) => (typeof v === 'function' ? (v as F) : c.fail('a function', v)),
  };
}

/**
 * Column names: 'a,b' (split on commas) or ['a', 'b'] (a name may then hold a comma). Each name
 * non-empty after trimming and given once. Returns the names, trimmed.
 */
export function columnsValue(): Kind<string[]> {
  const expected = 'column names, as "a,b" or ["a", "b"], each given once';
  return {
    text: true,
    check: (v, c) => {
      let items: unknown[];
      if (typeof v === 'string') items = v.split(',');
      else if (Array.isArray(v)) items = v;
      else return c.fail(expected, v);
      const names = items.map((x) => (typeof x === 'string' ? x.trim() : x));
      if (names.length === 0 || names.some((x) => typeof x !== 'string' || x === '')) return c.fail(expected, v);
      const dup = (names as string[]).find((n, i) => names.indexOf(n) !== i);
      if (dup !== undefined) c.fail(`${expected} (${JSON.stringify(dup)} is given twice)`, v);
      return names as string[];
    },
  };
}

const UNITS: Record<string, number> = {
  '': 1, b: 1, k: 1e3, kb: 1e3, m: 1e6, mb: 1e6, g: 1e9, gb: 1e9,
  kib: 1024, mib: 1024 ** 2, gib: 1024 ** 3, tib: 1024 ** 4,
};

/** A size in bytes: a number, or text such as `64MiB`, `1.5GiB`, `500MB`; at least `min`. */
export function sizeValue(min: number, minText: string): Kind<number> {
  const expected = `a size such as 64MiB or 1GiB, at least ${minText}`;
  const parse = (v: unknown, c: Checker): number => {
    let n: number;
    if (typeof v === 'number') n = Number.isFinite(v) ? Math.floor(v) : NaN;
    else if (typeof v === 'string') {
      const m = /^\s*(\d+(?:\.\d+)?)\s*([a-zA-Z]*)\s*$/.exec(v);
      const unit = m ? UNITS[m[2]!.toLowerCase()] : undefined;
      n = m && unit !== undefined ? Math.floor(Number(m[1]) * unit) : NaN;
    } else n = NaN;
    return Number.isFinite(n) && n >= min ? n : c.fail(expected, v);
  };
  return { text: true, check: parse };
}

/** Paths (one or more); '-' (standard input) at most once. */
export function inputPathsValue(): Kind<string[]> {
  const expected = 'one or more input paths (- for standard input, at most once)';
  return {
    check: (v, c) => {
      if (!Array.isArray(v) || v.length === 0 || v.some((x) => typeof x !== 'string' || x === '')) return c.fail(expected, v);
      if (v.filter((x) => x === '-').length > 1) return c.fail(expected, v);
      return [...(v as string[])];
    },
  };
}

/** "a", "b" or "c". */
export function listWords(words: readonly string[], last: 'or' | 'and'): string {
  if (words.length <= 1) return words.join('');
  return `${words.slice(0, -1).join(', ')} ${last} ${words[words.length - 1]}`;
}

// --- --help -------------------------------------------------------------------------------------

/** Where the help text of an option starts (two spaces, the flag and its argument, padding). */
const HELP_COLUMN = 26;

/**
 * The option list of a command's --help, section by section (in the order the sections first
 * appear), each option's flag, argument and help lines; the command line's own options (--json,
 * --quiet) close their sections. `only`: these sections alone (plan lists its own options and
 * refers to shuffle's).
 */
export function renderOptionList(spec: CommandSpec, only?: readonly string[]): string {
  const sections = new Map<string, string[]>();
  const add = (section: string, head: string, help: readonly string[]): void => {
    const lines = sections.get(section) ?? [];
    const pad = HELP_COLUMN - 2;
    if (head.length <= pad - 2) {
      lines.push(`  ${head.padEnd(pad)}${help[0] ?? ''}`.trimEnd());
      for (const l of help.slice(1)) lines.push(`${' '.repeat(HELP_COLUMN)}${l}`);
    } else {
      lines.push(`  ${head}`);
      for (const l of help) lines.push(`${' '.repeat(HELP_COLUMN)}${l}`);
    }
    sections.set(section, lines);
  };
  for (const def of Object.values(spec.table)) {
    if (!def.cli || !('flag' in def.cli)) continue;
    add(def.section ?? 'Options', `--${def.cli.flag}${def.cli.arg ? ` ${def.cli.arg}` : ''}`, def.help ?? []);
  }
  for (const def of Object.values(spec.cliOnly)) {
    add(def.section, `${def.short ? `-${def.short}, ` : ''}--${def.flag}${def.arg ? ` ${def.arg}` : ''}`, def.help);
  }
  return [...sections.entries()]
    .filter(([title]) => only === undefined || only.includes(title))
    .map(([title, lines]) => `${title}:\n${lines.join('\n')}\n`)
    .join('\n');
}
