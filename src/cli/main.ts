#!/usr/bin/env node
/**
 * The command line: argv -> options -> library call -> exit code. Exit 0 on success, 1 on a data
 * error, 2 on a usage error. Logs and progress go to stderr; data (`--json`) to stdout.
 * Subcommands are imported lazily so `--help` stays instant.
 */
import { RowdeckError, codedSystemError } from '../errors.js';
import { writeSync } from 'node:fs';
import { closest } from '../options/spec.js';
import { hookInterrupt } from './interrupt.js';
import { VERSION } from '../version.js';
import { MAIN_HELP } from './help.js';

/** Where the commands write. Tests pass their own (`isTTY: true` and `columns` make stderr act as a terminal). */
export interface CliIO {
  stdout: NodeJS.WritableStream & { isTTY?: boolean };
  stderr: NodeJS.WritableStream & { isTTY?: boolean; columns?: number };
}

const COMMANDS: Record<string, () => Promise<{ run(argv: string[], io: CliIO): Promise<number> }>> = {
  shuffle: () => import('./commands/shuffle.js'),
  profile: () => import('./commands/profile.js'),
  verify: () => import('./commands/verify.js'),
  report: () => import('./commands/report.js'),
  plan: async () => ({ run: (await import('./commands/cluster.js')).runPlan }),
  task: async () => ({ run: (await import('./commands/cluster.js')).runTaskCommand }),
  finish: async () => ({ run: (await import('./commands/cluster.js')).runFinish }),
  status: async () => ({ run: (await import('./commands/cluster.js')).runStatus }),
};

export async function runCli(argv: string[], io: CliIO = { stdout: process.stdout, stderr: process.stderr }): Promise<number> {
  const [cmd, ...rest] = argv;
  if (cmd === undefined || cmd === '--help' || cmd === '-h' || cmd === 'help') {
    if (cmd === 'help' && rest[0] && COMMANDS[rest[0]]) return runCli([rest[0], '--help'], io);
    // Asked for: help on stdout, exit 0. Not asked for (no command): on stderr, exit 2.
    (cmd === undefined ? io.stderr : io.stdout).write(MAIN_HELP);
    return cmd === undefined ? 2 : 0;
  }
  if (cmd === '--version' || cmd === '-V') {
    io.stdout.write(`rowdeck ${VERSION}\n`);
    return 0;
  }
  const load = COMMANDS[cmd];
  try {
    if (!load) {
      const near = closest(cmd, Object.keys(COMMANDS));
      throw new RowdeckError(
        'RDK_UNKNOWN_COMMAND',
        `unknown command "${cmd}".${near !== null ? ` Did you mean "${near}"?` : ''} Commands: ${Object.keys(COMMANDS).join(', ')}. See rowdeck --help.`,
        near !== null ? { suggestion: near } : {},
      );
    }
    const mod = await load();
    // Only a real process (not a test's in-process call) gets the signal line.
    const unhook = io.stderr === process.stderr ? hookInterrupt(cmd, (line) => writeSync(2, line)) : null;
    try {
      return await mod.run(rest, io);
    } finally {
      unhook?.();
    }
  } catch (err) {
    return reportError(err, io);
  }
}

export function reportError(thrown: unknown, io: CliIO): number {
  // A fault of the environment that reached here unwrapped still gets its code, path and reason.
  const err = codedSystemError(thrown);
  if (err instanceof RowdeckError) {
    io.stderr.write(`rowdeck: error ${err.code}: ${err.message}\n`);
    if (err.isUsage) io.stderr.write('Run with --help for usage.\n');
    return err.isUsage ? 2 : 1;
  }
  const e = err as Error;
  io.stderr.write(`rowdeck: internal error: ${e?.stack ?? String(err)}\nPlease report this with the command you ran.\n`);
  return 1;
}

// Run when executed directly (not when imported by tests).
const invokedAs = process.argv[1] ?? '';
if (/(?:^|[\\/])(?:main\.c?js|rowdeck)$/.test(invokedAs)) {
  // A closed stdout (e.g. piped into `head`) is a normal way to stop, not a crash.
  process.stdout.on('error', (e: NodeJS.ErrnoException) => {
    if (e.code === 'EPIPE') process.exit(0);
    throw e;
  });
  runCli(process.argv.slice(2)).then(
    (code) => {
      process.exitCode = code;
    },
    (err) => {
      process.exitCode = reportError(err, { stdout: process.stdout, stderr: process.stderr });
    },
  );
}
