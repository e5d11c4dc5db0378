/**
 * The command line of a command, read by its option table (src/options/): `--name value`,
 * `--name=value`, switches, `--no-…` for options that default to on, `--against a b c` (every
 * argument up to the next option), `--` ending the options, `-h`; an option given again replaces
 * its value (so a script can append an override). Values become the library's
 * types here (numbers, true/false) and are checked by the library's resolver, which spells every
 * message with the flags: the options object is marked as the command line's.
 */
import { RowdeckError } from '../errors.js';
import { checkerFor, commandName, fromCommandLine, spellOption, unknownOption, type CommandSpec, type OptionDef } from '../options.js';

export interface CommandLine<O> {
  /**
   * The library's options, marked as the command line's (see fromCommandLine): values of the
   * library's types, checked by the library's resolver they are passed to.
   */
  options: O;
  /** The command line's own options (--json, --quiet, --html FILE, --help): true or their text. */
  own: Record<string, string | true>;
}

/** A negative number is a value, not an option (`--tolerance -1` reaches the check and its message). */
const NEGATIVE_NUMBER = /^-\d/;

/** A flag of the command line: a library option's, or the command line's own. */
type Flag =
  | { kind: 'library'; key: string; def: OptionDef<unknown>; arg: string | undefined; multiple: boolean; negated: boolean }
  | { kind: 'own'; own: string; arg: string | undefined };

export function parseCommandLine<O>(spec: CommandSpec<O>, argv: readonly string[]): CommandLine<O> {
  const flags = new Map<string, Flag>();
  let positional: { key: string; many: boolean } | null = null;
  for (const [key, def] of Object.entries(spec.table)) {
    if (def.cli && 'flag' in def.cli) flags.set(def.cli.flag, { kind: 'library', key, def, arg: def.cli.arg, multiple: def.cli.multiple === true, negated: def.cli.negated === true });
    if (def.cli && 'positional' in def.cli) positional = { key, many: def.cli.many };
  }
  const shorts = new Map<string, string>();
  for (const [own, def] of Object.entries(spec.cliOnly)) {
    flags.set(def.flag, { kind: 'own', own, arg: def.arg });
    if (def.short) shorts.set(def.short, def.flag);
  }
  const options: Record<string, unknown> = {};
  const own: Record<string, string | true> = {};
  const positionals: string[] = [];
  const usage = (flag: string, message: string): RowdeckError => new RowdeckError('RDK_OPTION', `Invalid option --${flag}: ${message}`, { option: flag });

  for (let i = 0; i < argv.length; i++) {
    const arg = argv[i]!;
    if (arg === '--') {
      positionals.push(...argv.slice(i + 1));
      break;
    }
    if (arg === '-' || !arg.startsWith('-')) {
      positionals.push(arg);
      continue;
    }
    let name: string;
    let inline: string | undefined;
    if (arg.startsWith('--')) {
      const eq = arg.indexOf('=');
      name = eq < 0 ? arg.slice(2) : arg.slice(2, eq);
      inline = eq < 0 ? undefined : arg.slice(eq + 1);
    } else {
      // Short options: only those listed in --help (-h).
      const long = shorts.get(arg.slice(1));
      if (long === undefined) throw unknownOption(spec, arg, 'cli');
      name = long;
    }
    const flag = flags.get(name);
    if (!flag) throw unknownOption(spec, `--${name}`, 'cli');
    const multiple = flag.kind === 'library' && flag.multiple;
    const values: string[] = [];
    if (flag.arg === undefined) {
      if (inline !== undefined) throw usage(name, `it takes no value (it is a switch), got ${JSON.stringify(inline)}`);
    } else if (inline !== undefined) {
      values.push(inline);
    } else if (multiple) {
      while (i + 1 < argv.length && (argv[i + 1] === '-' || !argv[i + 1]!.startsWith('-'))) values.push(argv[++i]!);
    } else if (i + 1 < argv.length && (argv[i + 1] === '-' || !argv[i + 1]!.startsWith('-') || NEGATIVE_NUMBER.test(argv[i + 1]!))) {
      values.push(argv[++i]!);
    }
    if (flag.arg !== undefined && values.length === 0) {
      const next = argv[i + 1];
      const hint = next !== undefined ? ` (a value that starts with - is given as --${name}=${next})` : '';
      throw usage(name, `expected ${flag.arg} after it, got ${next !== undefined ? JSON.stringify(next) : 'nothing'}${hint}`);
    }
    if (flag.kind === 'own') {
      own[flag.own] = flag.arg !== undefined ? values[0]! : true;
      continue;
    }
    const { key, def } = flag;
    if (flag.arg === undefined) options[key] = !flag.negated;
    else if (multiple) options[key] = [...((options[key] as string[] | undefined) ?? []), ...values];
    else options[key] = def.fromText ? def.fromText(values[0]!, checkerFor('cli', spec.table, key)) : values[0]!;
  }

  if (positional === null) {
    if (positionals.length > 0) {
      throw new RowdeckError('RDK_OPTION', `${commandName(spec, 'cli')} takes no arguments besides its options, got ${positionals.map((p) => JSON.stringify(p)).join(' ')}. See ${commandName(spec, 'cli')} --help.`);
    }
  } else if (positionals.length > 0) {
    if (!positional.many && positionals.length > 1) {
      const name = spellOption('cli', spec.table, positional.key);
      const more = spec.command === 'verify' ? ' To compare with inputs, list them after --against.' : '';
      throw new RowdeckError('RDK_OPTION', `${commandName(spec, 'cli')} takes one ${name}, got ${positionals.length}: ${positionals.join(', ')}.${more}`, { option: positional.key });
    }
    options[positional.key] = positional.many ? positionals : positionals[0]!;
  }
  // Keys of the table only, each value of its option's type (fromText) or the text the library's check reads.
  return { options: fromCommandLine(options) as O, own };
}

