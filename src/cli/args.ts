/**
 * Argument parsing shared by the commands: node:util's parseArgs, with its errors turned into
 * coded usage errors, and `--name=value` / `--name value` both accepted.
 */
import { parseArgs, type ParseArgsConfig } from 'node:util';
import { RowdeckError } from '../errors.js';

export type OptionSpec = NonNullable<ParseArgsConfig['options']>;

export function parseCommandArgs(argv: string[], options: OptionSpec): { values: Record<string, string | boolean | string[] | undefined>; positionals: string[] } {
  // `--tolerance -1` would otherwise read as two options: glue a negative number to its option,
  // so the value reaches our own validation and its clearer message.
  const args: string[] = [];
  for (let i = 0; i < argv.length; i++) {
    const a = argv[i]!;
    const name = a.startsWith('--') ? a.slice(2) : '';
    const next = argv[i + 1];
    if (name && options[name]?.type === 'string' && next !== undefined && /^-\d/.test(next)) {
      args.push(`${a}=${next}`);
      i++;
    } else args.push(a);
  }
  try {
    const r = parseArgs({ args, options, allowPositionals: true, strict: true, allowNegative: false });
    return { values: r.values as Record<string, string | boolean | string[] | undefined>, positionals: r.positionals };
  } catch (err) {
    const e = err as Error & { code?: string };
    const msg = e.message.replace(/\. To specify a positional argument.*$/s, '.');
    if (e.code === 'ERR_PARSE_ARGS_UNKNOWN_OPTION') throw new RowdeckError('ERR_UNKNOWN_OPTION', msg);
    throw new RowdeckError('ERR_OPTION', msg);
  }
}

export function intArg(name: string, v: unknown): number | undefined {
  if (v === undefined) return undefined;
  const s = String(v);
  if (!/^\d+$/.test(s)) throw new RowdeckError('ERR_OPTION', `Invalid option "${name}": expected a whole number, got ${JSON.stringify(s)}`);
  return Number(s);
}

export function numArg(name: string, v: unknown): number | undefined {
  if (v === undefined) return undefined;
  const n = Number(v);
  if (String(v).trim() === '' || !Number.isFinite(n)) throw new RowdeckError('ERR_OPTION', `Invalid option "${name}": expected a number, got ${JSON.stringify(v)}`);
  return n;
}

export function strArg(v: unknown): string | undefined {
  return v === undefined ? undefined : String(v);
}

/** Options every reading command shares. */
export const INPUT_OPTIONS: OptionSpec = {
  format: { type: 'string' },
  delimiter: { type: 'string' },
  'no-header': { type: 'boolean' },
  'on-bad-record': { type: 'string' },
  'exclude-values': { type: 'boolean' },
  json: { type: 'boolean' },
  quiet: { type: 'boolean', short: 'q' },
  help: { type: 'boolean', short: 'h' },
};
