/**
 * The command line as a user meets it: the built `dist/cli/main.cjs` run in a child process, with
 * exit codes, stdout and stderr checked. Exit codes 0/1/2 and the stdout/stderr split follow the
 * common Unix practice (data on stdout, diagnostics on stderr, 2 for usage errors); the CSV
 * details follow RFC 4180 section 2 (quoted fields may hold line breaks and doubled quotes).
 * `npm test` builds dist first (the `pretest` script).
 */
import { spawn, spawnSync, type SpawnSyncReturns } from 'node:child_process';
import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parse } from 'csv-parse/sync';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';

const CLI = fileURLToPath(new URL('../dist/cli/main.cjs', import.meta.url));
const PKG = JSON.parse(readFileSync(fileURLToPath(new URL('../package.json', import.meta.url)), 'utf8')) as { version: string };

let dir: string;

/** A small invented sensor log, sorted by fault class like a real export would be. */
function makeReadings(rows: number): string {
  const faults = ['none', 'none', 'none', 'drift', 'spike'];
  const lines = ['reading_id,sensor_id,temp_c,note,fault'];
  for (let i = 0; i < rows; i++) {
    const fault = faults[Math.floor((i * faults.length) / rows)]!;
    const note = i % 7 === 0 ? '"mast bent, re-aligned\nby crew ""B"""' : i % 5 === 0 ? 'checked' : '';
    lines.push(`${i + 1},FS-${String(i % 12).padStart(3, '0')},${(i % 40) - 5}.5,${note},${fault}`);
  }
  return lines.join('\n') + '\n';
}

function runCli(args: string[], opts: { input?: string; cwd?: string } = {}): SpawnSyncReturns<string> {
  const r = spawnSync(process.execPath, [CLI, ...args], {
    cwd: opts.cwd ?? dir,
    input: opts.input ?? '',
    encoding: 'utf8',
    timeout: 60_000,
  });
  if (r.error) throw r.error;
  return r;
}

/** Entries of the test folder that a failed run must not leave behind. */
function leftovers(): string[] {
  return readdirSync(dir).filter((f) => f.startsWith('out') || f.startsWith('.rowdeck-'));
}

beforeAll(() => {
  if (!existsSync(CLI)) throw new Error(`${CLI} not found: run "npm run build" first (npm test does it).`);
  dir = mkdtempSync(join(tmpdir(), 'rowdeck-cli-'));
  writeFileSync(join(dir, 'readings.csv'), makeReadings(300));
});
afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('version and help', () => {
  it('--version prints the version from package.json', () => {
    const r = runCli(['--version']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toBe(`rowdeck ${PKG.version}\n`);
    expect(r.stderr).toBe('');
  });

  it('--help lists the commands and exits 0', () => {
    const r = runCli(['--help']);
    expect(r.status, r.stderr).toBe(0);
    for (const cmd of ['shuffle', 'profile', 'verify']) expect(r.stdout).toContain(`rowdeck ${cmd}`);
    expect(r.stderr).toBe('');
  });

  it('shuffle --help exits 0 and carries the cautions', () => {
    const r = runCli(['shuffle', '--help']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toContain('--partitions');
    const at = r.stdout.search(/cautions?:/i);
    expect(at).toBeGreaterThan(0);
    const cautions = r.stdout.slice(at);
    expect(cautions).toMatch(/time-ordered/i);
    expect(cautions).toContain('--group');
    expect(cautions).toContain('--exclude-values');
    expect(cautions).toMatch(/--force is for replacing rowdeck's own output/);
  });

  it('no arguments at all is a usage error (exit 2) that shows the usage', () => {
    const r = runCli([]);
    expect(r.status, r.stderr).toBe(2);
    expect(r.stdout + r.stderr).toContain('Usage:');
  });
});

describe('usage errors exit 2, print RDK_... on stderr and nothing on stdout', () => {
  const cases: [string, string[], string, RegExp][] = [
    ['an unknown command', ['frobnicate'], 'RDK_UNKNOWN_COMMAND', /frobnicate/],
    ['an unknown option', ['shuffle', 'readings.csv', '--out', 'out-u1', '--shuffle-harder'], 'RDK_UNKNOWN_OPTION', /--shuffle-harder/],
    ['a non-numeric --partitions', ['shuffle', 'readings.csv', '--out', 'out-u2', '--partitions', 'x'], 'RDK_OPTION', /partitions/],
    ['--partitions 0', ['shuffle', 'readings.csv', '--out', 'out-u3', '--partitions', '0'], 'RDK_OPTION', /partitions/],
    ['--tolerance -1', ['shuffle', 'readings.csv', '--out', 'out-u4', '--tolerance', '-1'], 'RDK_OPTION', /tolerance/],
    ['--tolerance=-1', ['shuffle', 'readings.csv', '--out', 'out-u5', '--tolerance=-1'], 'RDK_OPTION', /tolerance/],
    ['a missing --out', ['shuffle', 'readings.csv'], 'RDK_MISSING_ARGUMENT', /--out/],
  ];
  for (const [what, args, code, mentions] of cases) {
    it(`${what}`, () => {
      const r = runCli(args);
      expect(r.status, r.stderr).toBe(2);
      expect(r.stdout).toBe('');
      expect(r.stderr).toContain(code);
      expect(r.stderr).toMatch(mentions);
      expect(r.stderr).not.toMatch(/\n\s+at /); // no stack trace
      expect(leftovers()).toEqual([]);
    });
  }
});

describe('the fold column already there: named as the command line names it', () => {
  it.each([
    ['a CSV header', 'fold-taken.csv', 'reading_id,fold\n1,a\n2,b\n', 'Invalid option --fold-column: the input already has a column named "fold". Name the added column otherwise (--fold-column NAME).'],
    ['a JSON Lines record (found by the reader)', 'fold-taken.jsonl', '{"id":1}\n{"id":2,"fold":0}\n', 'fold-taken.jsonl:2: this record already has a key "fold", the name of the fold column the output adds (it would hold two). Name the fold column otherwise (--fold-column NAME).'],
  ])('%s', (_what, name, text, message) => {
    writeFileSync(join(dir, name), text);
    const r = runCli(['shuffle', name, '--out', 'out-fold', '--folds', '2', '--threads', '0']);
    expect(r.status).toBe(2);
    expect(r.stderr).toBe(`rowdeck: error RDK_OPTION: ${message}\nRun with --help for usage.\n`);
    expect(leftovers()).toEqual([]);
  });
});

describe('data errors exit 1 and leave no output folder', () => {
  it('a missing input file', () => {
    const r = runCli(['shuffle', 'no-such-readings.csv', '--out', 'out-d1', '--seed', 's']);
    expect(r.status, r.stderr).toBe(1);
    expect(r.stdout).toBe('');
    expect(r.stderr).toContain('RDK_INPUT_NOT_FOUND');
    expect(r.stderr).toContain('no-such-readings.csv');
    expect(leftovers()).toEqual([]);
  });

  it('a CSV record with too few fields is reported at its physical line', () => {
    // Physical lines: 1 header; 2; 3-4 one record whose quoted field holds a line break
    // (RFC 4180 section 2, rule 6); 5; 6; 7 is the short record. So record 5 sits on line 7.
    const text = 'reading_id,sensor_id,fault\n1,FS-001,none\n2,"FS-\n002",none\n3,FS-003,drift\n4,FS-004,spike\n5,FS-005\n6,FS-006,none\n';
    writeFileSync(join(dir, 'bad.csv'), text);
    const r = runCli(['shuffle', 'bad.csv', '--out', 'out-d2', '--seed', 's']);
    expect(r.status, r.stderr).toBe(1);
    expect(r.stdout).toBe('');
    expect(r.stderr).toContain('RDK_FIELD_COUNT');
    expect(r.stderr).toMatch(/bad\.csv:7\b/);
    expect(r.stderr).not.toMatch(/\n\s+at /);
    expect(leftovers()).toEqual([]);
  });

  it('an unterminated quote is a data error too, with the line where the field opened', () => {
    // Line 3 opens a quoted field that never closes (RFC 4180 section 2, rule 5: a field that
    // starts with a quote must end with one).
    writeFileSync(join(dir, 'open.csv'), 'reading_id,note,fault\n1,ok,none\n2,"never closed,none\n3,ok,drift\n');
    const r = runCli(['shuffle', 'open.csv', '--out', 'out-d3', '--seed', 's']);
    expect(r.status, r.stderr).toBe(1);
    expect(r.stdout).toBe('');
    expect(r.stderr).toContain('RDK_UNTERMINATED_QUOTE');
    expect(r.stderr).toMatch(/open\.csv:3\b/);
    expect(leftovers()).toEqual([]);
  });
});

describe('a successful run', () => {
  it('exits 0 and writes nothing on stdout without --json', () => {
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-plain', '--partitions', '3', '--stratify', 'fault', '--seed', 'field-season', '--threads', '1']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toBe('');
    expect(existsSync(join(dir, 'ok-plain', 'manifest.json'))).toBe(true);
    // The summary line goes to stderr, and no progress redraws (stderr is a pipe here, not a terminal).
    expect(r.stderr).toContain('300 records');
    expect(r.stderr).not.toContain('\r');
    expect(r.stderr).not.toMatch(/scatter|gather/);
  });

  it('--json prints the manifest that it also writes to manifest.json', () => {
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-json', '--partitions', '2', '--stratify', 'fault', '--folds', '3', '--seed', 'field-season', '--json', '--threads', '1']);
    expect(r.status, r.stderr).toBe(0);
    const printed = JSON.parse(r.stdout) as { seed: string; input: { records: number }; output: { parts: { path: string; records: number }[] } };
    const written = JSON.parse(readFileSync(join(dir, 'ok-json', 'manifest.json'), 'utf8')) as unknown;
    expect(printed).toEqual(written);
    expect(printed.seed).toBe('field-season');
    expect(printed.input.records).toBe(300);
    // The manifest's part counts agree with the files, re-read by csv-parse (an independent parser).
    for (const p of printed.output.parts) {
      const rows = parse(readFileSync(join(dir, 'ok-json', p.path)), { columns: true }) as Record<string, string>[];
      expect(rows.length).toBe(p.records);
      expect(Object.keys(rows[0]!)).toContain('fold');
    }
  });

  it('--quiet prints nothing on stderr, not even the default-seed note', () => {
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-quiet', '--quiet', '--threads', '1']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr).toBe('');
    expect(r.stdout).toBe('');
    expect(existsSync(join(dir, 'ok-quiet', 'manifest.json'))).toBe(true);
  });

  it('without --seed, says on stderr that the default seed is used', () => {
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-default-seed', '--threads', '1']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr).toMatch(/\(the default: pass --seed to choose one\)/);
  });

  it('reads stdin given as - with --format csv', () => {
    const text = makeReadings(40);
    const r = runCli(['shuffle', '-', '--format', 'csv', '--out', 'ok-stdin', '--partitions', '2', '--seed', 'pipe', '--json', '--quiet', '--threads', '1'], { input: text });
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr).toBe('');
    const m = JSON.parse(r.stdout) as { input: { records: number }; output: { parts: { path: string }[] } };
    expect(m.input.records).toBe(40);
    // Every input record comes out once (csv-parse reads both sides; order aside).
    const inRows = (parse(text, { columns: true }) as Record<string, string>[]).map((x) => JSON.stringify(x)).sort();
    const outRows = m.output.parts
      .flatMap((p) => parse(readFileSync(join(dir, 'ok-stdin', p.path)), { columns: true }) as Record<string, string>[])
      .map((x) => JSON.stringify(x))
      .sort();
    expect(outRows).toEqual(inRows);
  });

  it('reads a named pipe as a stream (it is not opened for reading in blocks)', () => {
    const text = makeReadings(300);
    writeFileSync(join(dir, 'pipe-src.csv'), text);
    // The shell makes the pipe and writes into it once rowdeck opens it; a second open of the
    // pipe for block reading would wait forever or lose bytes.
    // (timeout: a writer left waiting for a reader must not outlive the test.)
    const script = `mkfifo pipe.csv && (timeout 20 sh -c 'cat pipe-src.csv > pipe.csv' </dev/null >/dev/null 2>&1 &) && ROWDECK_BLOCK_BYTES=512 "${process.execPath}" "${CLI}" shuffle pipe.csv --out ok-fifo --partitions 2 --seed pipe --json --quiet --threads 2`;
    const r = spawnSync('sh', ['-c', script], { cwd: dir, encoding: 'utf8', timeout: 30_000 });
    expect(r.status, r.stderr).toBe(0);
    const m = JSON.parse(r.stdout) as { input: { records: number } };
    expect(m.input.records).toBe(300);
    // Quantile bins read the input twice: a pipe is refused up front, by name.
    const bins = `(timeout 20 sh -c 'cat pipe-src.csv > pipe.csv' </dev/null >/dev/null 2>&1 &); "${process.execPath}" "${CLI}" shuffle pipe.csv --out no-fifo --stratify temp_c:bins=4 --quiet; rc=$?; cat pipe.csv > /dev/null; exit $rc`;
    const b = spawnSync('sh', ['-c', bins], { cwd: dir, encoding: 'utf8', timeout: 30_000 });
    expect(b.status).toBe(2);
    expect(b.stderr).toContain('needs files, not standard input or a pipe (pipe.csv)');
  });

  it('the same seed gives the same bytes on a second run', () => {
    const args = ['readings.csv', '--partitions', '2', '--stratify', 'fault', '--seed', 'again', '--quiet', '--threads', '1'];
    for (const out of ['ok-a', 'ok-b']) {
      const r = runCli(['shuffle', ...args, '--out', out]);
      expect(r.status, r.stderr).toBe(0);
    }
    for (const f of ['part-00000.csv', 'part-00001.csv']) {
      expect(readFileSync(join(dir, 'ok-b', f))).toEqual(readFileSync(join(dir, 'ok-a', f)));
    }
    // ...and the shuffle did move records: the input is sorted by fault, a part is not.
    const first = readFileSync(join(dir, 'ok-a', 'part-00000.csv'), 'utf8');
    expect(first).not.toBe(readFileSync(join(dir, 'readings.csv'), 'utf8'));
  });
});

describe('warnings and what the summary says was kept to', () => {
  it('--group with fewer groups than parts: a warning line before the summary, the sizes achieved after it', () => {
    // Three fault classes as groups over eight partitions: five parts get none.
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-few-groups', '--partitions', '8', '--group', 'fault', '--seed', 'g', '--threads', '0']);
    expect(r.status, r.stderr).toBe(0);
    const lines = r.stderr.trimEnd().split('\n');
    expect(lines[0]).toMatch(/^rowdeck: warning: --group fault: 3 groups for 8 parts: 5 parts get no records \(part-\d{5}\.csv, part-\d{5}\.csv, part-\d{5}\.csv, …\); part sizes run from 0 to \d+ records against a target of 38 each/);
    expect(lines[1]).toMatch(/^rowdeck: 300 records -> 8 part\(s\) in .*, whole groups of "fault"\)\.$/);
    expect(lines[2]).toMatch(/^rowdeck: part sizes 0 to \d+ records \(target 38 each\): whole groups are dealt, so sizes follow them\.$/);
    // --quiet keeps the warning: it is about the result.
    const q = runCli(['shuffle', 'readings.csv', '--out', 'ok-few-groups-q', '--partitions', '8', '--group', 'fault', '--seed', 'g', '--threads', '0', '--quiet']);
    expect(q.stderr.trimEnd().split('\n')).toEqual([lines[0]]);
  });

  it('stratified exact dealing: the classes are kept within --tolerance, said with the deviation', () => {
    const r = runCli(['shuffle', 'readings.csv', '--out', 'ok-kept', '--partitions', '3', '--stratify', 'fault', '--tolerance', '0.2', '--seed', 'k', '--threads', '0']);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr).toMatch(/, classes within --tolerance 0\.2: max class deviation \d+\.\d\d%\)\.\n$/);
  });
});

describe('terminal behaviour', () => {
  // util-linux `script` runs the command on a pseudo-terminal; skipped where it is missing.
  const probe = spawnSync('script', ['--version'], { encoding: 'utf8' });
  const hasScript = !probe.error && probe.status === 0;

  it.skipIf(!hasScript)('draws progress when stderr is a terminal (control for the test above)', () => {
    const cmd = `"${process.execPath}" "${CLI}" shuffle readings.csv --out ok-tty --seed t --threads 1`;
    const r = spawnSync('script', ['-qec', cmd, '/dev/null'], { cwd: dir, encoding: 'utf8', timeout: 60_000 });
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/\r(scatter|gather)/);
  });

  it('a closed stdout while printing --json ends quietly, without a stack trace', async () => {
    const child = spawn(process.execPath, [CLI, 'shuffle', 'readings.csv', '--out', 'ok-epipe', '--seed', 'p', '--json', '--quiet', '--threads', '1'], {
      cwd: dir,
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    // Close our end of the pipe before the manifest is ready, as `| head -c 10` would.
    child.stdout.destroy();
    let stderr = '';
    child.stderr.setEncoding('utf8');
    child.stderr.on('data', (s: string) => (stderr += s));
    const code = await new Promise<number | null>((res) => child.on('close', (c) => res(c)));
    expect(stderr).not.toMatch(/\n\s+at /);
    expect(stderr).not.toMatch(/EPIPE|internal error/);
    expect(code).toBe(0);
  });
});

describe('interrupted', () => {
  /**
   * Runs `args` reading a standard input that never ends, sends SIGINT after `delay` ms, and
   * returns stderr and how the process ended. A signal that lands before the command has started
   * (node still loading) ends it silently: tried again with a longer wait.
   */
  async function interrupt(args: string[]): Promise<{ stderr: string; signal: NodeJS.Signals | null }> {
    let last = { stderr: '', signal: null as NodeJS.Signals | null };
    for (const delay of [1000, 2500, 6000]) {
      const child = spawn(process.execPath, [CLI, ...args], { cwd: dir, stdio: ['pipe', 'ignore', 'pipe'] });
      // A first line, so the command is past its start and waiting for more of standard input.
      child.stdin.write('reading_id,fault\n1,none\n');
      let stderr = '';
      child.stderr.setEncoding('utf8');
      child.stderr.on('data', (s: string) => (stderr += s));
      await new Promise((res) => setTimeout(res, delay));
      child.kill('SIGINT');
      const signal = await new Promise<NodeJS.Signals | null>((res) => child.on('close', (_c, sig) => res(sig)));
      child.stdin.destroy();
      last = { stderr, signal };
      if (stderr !== '') break;
    }
    return last;
  }

  it('Ctrl-C (SIGINT) during profile prints one line and ends by the signal', async () => {
    const r = await interrupt(['profile', '-', '--format', 'csv']);
    expect(r.stderr).toBe('rowdeck: profile stopped by SIGINT.\n');
    expect(r.signal).toBe('SIGINT');
  });

  it('during shuffle, the line of its own cleanup, once', async () => {
    const r = await interrupt(['shuffle', '-', '--format', 'csv', '--out', 'never-interrupted', '--threads', '0']);
    expect(r.stderr).toMatch(/^rowdeck: stopped by SIGINT; removed \S+\.rowdeck-spill-/);
    expect(r.stderr.trimEnd().split('\n')).toHaveLength(1);
    expect(r.signal).toBe('SIGINT');
    expect(leftovers()).toEqual([]);
  });
});
