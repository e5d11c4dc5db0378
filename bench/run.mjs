#!/usr/bin/env node
// rowdeck's benchmark harness: the cases of bench/cases.mjs, with one untimed warm-up of every
// command first, then rounds that each run every command once (A B C …, A B C …), so that a slow
// moment of this shared machine falls on all of them alike. Reports min, median and max of wall
// time, CPU time, peak RSS and bytes written; ratios and goals come from the same rounds.
// Run `node bench/run.mjs --help` for the options.
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, readdirSync, readFileSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { loadavg } from 'node:os';
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { cases as catalogue, figures as figureList, inputs as inputSpecs, reportGroups } from './cases.mjs';
import { ensureInputs } from './lib/data.mjs';
import { availableMemory, detectTools, freeBytes, freshWriteCost, machineInfo, measure } from './lib/measure.mjs';
import { schedule, summarize } from './lib/plan.mjs';
import { busyNote, casesTable, compareTable, figuresTable, machineLine, mergeLatest, writeDocSection } from './lib/report.mjs';

const HELP = `npm run bench -- [options]

  --group a,b      groups of cases to run (default: core). Groups: GROUPS; all: every case
  --only x,y       only these cases (names, * matches any text; within --group if given too)
  --runs N         timed rounds after the warm-up (default 3)
  --quick          100 MB and 20 MB files instead of 1 GB and 200 MB, to try the harness
  --compare DIR    also time every rowdeck case with the build in DIR (DIR/dist/cli/main.cjs or,
                   in older builds, main.js; or that file itself), side by side in the same
                   rounds, and print this build's time over that one's for each case (--cli-b
                   PATH: the same)
  --scratch DIR    where outputs and spill go (default bench/data/tmp); removed after the run
  --list           print the groups and cases, and stop

Writes bench/results/last-run.json. A complete run of a report group (core, scale, cluster,
gzip) that is not --quick, --only or --compare also writes its entry in
bench/results/latest.json and its section of docs/benchmarks.md.`;

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const args = process.argv.slice(2);
const flag = (name) => args.includes(`--${name}`);
const value = (name, dflt) => {
  const i = args.indexOf(`--${name}`);
  if (i < 0) return dflt;
  if (i + 1 >= args.length || args[i + 1].startsWith('--')) usage(`--${name} needs a value`);
  return args[i + 1];
};
function usage(msg) {
  console.error(`bench: ${msg}\n\n${HELP.replace('GROUPS', '…')}`);
  process.exit(2);
}
const known = new Set(['group', 'only', 'runs', 'quick', 'compare', 'cli-b', 'scratch', 'list', 'help']);
for (const a of args) if (a.startsWith('--') && !known.has(a.slice(2))) usage(`unknown option ${a}`);

const quick = flag('quick');
const runs = Number(value('runs', 3));
if (!Number.isInteger(runs) || runs < 1) usage('--runs must be a whole number of 1 or more');
const dataDir = join(root, 'bench', 'data');
const specs = inputSpecs(quick);

/** An input's size: the file's if made, else what it will be (copies: times the original). */
function inputBytes(key) {
  const spec = specs[key];
  const file = join(dataDir, spec.file);
  if (existsSync(file)) return statSync(file).size;
  if (spec.copiesOf) return spec.times * inputBytes(spec.copiesOf);
  const i = spec.generate?.indexOf('--bytes') ?? -1;
  return i >= 0 ? Number(spec.generate[i + 1]) : 0;
}

const all = catalogue({ inputBytes, root });
const groupNames = [...new Set(all.flatMap((c) => c.groups))];
if (flag('help')) {
  console.log(HELP.replace('GROUPS', groupNames.join(', ')));
  process.exit(0);
}
if (flag('list')) {
  for (const g of groupNames) console.log(`${g}: ${all.filter((c) => c.groups.includes(g)).map((c) => c.name).join(', ')}`);
  process.exit(0);
}

const only = value('only', null)?.split(',');
// --only alone looks among all cases; --group alone defaults to core.
const groups = value('group', only ? 'all' : 'core').split(',');
for (const g of groups) if (g !== 'all' && !groupNames.includes(g)) usage(`no group named ${g} (groups: ${groupNames.join(', ')}, all)`);
const matches = (name, pattern) => new RegExp(`^${pattern.split('*').map((p) => p.replace(/[.+?^${}()|[\]\\]/g, '\\$&')).join('.*')}$`).test(name);
const selected = all.filter((c) => (groups.includes('all') || c.groups.some((g) => groups.includes(g))) && (!only || only.some((p) => matches(c.name, p))));
if (selected.length === 0) usage('no case matches --group and --only');

// The builds: this checkout's, and with --compare another one.
// A build's command line: its bin (dist/cli/main.cjs), or dist/cli/main.js in builds older than it.
const cliOf = (dir) => [join(dir, 'dist', 'cli', 'main.cjs'), join(dir, 'dist', 'cli', 'main.js')].find((f) => existsSync(f)) ?? null;
const builds = [{ label: 'A', dir: root, cli: join(root, 'dist', 'cli', 'main.cjs') }];
const other = value('compare', null) ?? value('cli-b', null);
if (other) {
  const p = resolve(other);
  const inTree = cliOf(p);
  const cli = inTree ?? p;
  if (!existsSync(cli) || statSync(cli).isDirectory()) usage(`--compare ${other}: neither ${join(p, 'dist', 'cli', 'main.cjs')} nor a command line's file; build it first (npm run build there)`);
  builds.push({ label: 'B', dir: inTree ? p : dirname(cli), cli });
}
if (!existsSync(builds[0].cli)) spawnSync('npm', ['run', 'build'], { cwd: root, stdio: 'inherit' });

const tools = {
  ...detectTools(),
  shuf: spawnSync('shuf', ['--version'], { stdio: 'ignore' }).status === 0,
  dd: spawnSync('dd', ['--version'], { stdio: 'ignore' }).status === 0,
  duckdb: existsSync(join(root, 'bench', 'node_modules', '@duckdb', 'node-api')),
  gzip: spawnSync('gzip', ['--version'], { stdio: 'ignore' }).status === 0,
};
const toolHint = {
  shuf: 'GNU coreutils shuf is not installed',
  dd: 'dd is not installed',
  duckdb: 'the SQL peer is not installed (npm install --prefix bench)',
  gzip: 'gzip is not installed',
};

// Skips for a missing tool come first, and each is said with one line.
const skipped = {};
const runnable = [];
for (const c of selected) {
  const missing = [c.requires ?? []].flat().find((t) => !tools[t]);
  if (missing) {
    skipped[c.name] = toolHint[missing];
    console.error(`skip ${c.name}: ${skipped[c.name]}`);
  } else runnable.push(c);
}
if (!tools.gnuTime) console.error('note: GNU time (/usr/bin/time) is missing, so peak RSS and CPU times are not measured (Debian: apt-get install time)');
if (!tools.procIo) console.error('note: /proc/PID/io is missing, so bytes written are not measured');

const paths = ensureInputs(root, dataDir, specs, [...new Set(runnable.map((c) => c.input))]);
const scratch = resolve(value('scratch', join(dataDir, 'tmp')), `run-${process.pid}`);
mkdirSync(scratch, { recursive: true });
const cleanScratch = () => rmSync(scratch, { recursive: true, force: true });
process.on('SIGINT', () => {
  cleanScratch();
  process.exit(130);
});

const machine = machineInfo(root, builds);
machine.freshWrite = [freshWriteCost(scratch)];
console.error(`\n${machineLine(machine)}\n`);

/** Budget of a case for its peak RSS figure: its `--memory`, else the build's default. */
const defaultBudgets = {};
async function defaultBudget(build) {
  if (!(build.label in defaultBudgets)) {
    let v = null;
    try {
      const mod = await import(pathToFileURL(join(dirname(build.cli), '..', 'options.js')).href);
      if (typeof mod.DEFAULT_MEMORY === 'number') v = mod.DEFAULT_MEMORY;
    } catch {
      // a build without it: the manifest may say
    }
    defaultBudgets[build.label] = v;
  }
  return defaultBudgets[build.label];
}
/** What a shuffle's manifest says about the run: buckets, and the budget and layout where recorded. */
function manifestFacts(out) {
  const file = join(out, 'manifest.json');
  if (!existsSync(file)) return null;
  try {
    const m = JSON.parse(readFileSync(file, 'utf8'));
    const run = m.run ?? {};
    const budget = [run.memory, run.budget, run.memoryBytes, m.options?.memory].find((x) => typeof x === 'number') ?? null;
    return { buckets: run.buckets ?? null, threads: run.threads ?? null, budget, layout: run.layout ?? null, timingsMs: run.timingsMs ?? null };
  } catch {
    return null;
  }
}

/** The size of what a command wrote to `out`: the file, or the files under the folder but rowdeck's manifest and report. */
function outputBytes(out) {
  if (!existsSync(out)) return null;
  const st = statSync(out);
  if (!st.isDirectory()) return st.size;
  let n = 0;
  for (const f of readdirSync(out, { recursive: true })) {
    if (f === 'manifest.json' || f === 'report.html') continue;
    const fs = statSync(join(out, f));
    if (fs.isFile()) n += fs.size;
  }
  return n;
}

const byName = Object.fromEntries(runnable.map((c) => [c.name, c]));
const buildOf = Object.fromEntries(builds.map((b) => [b.label, b]));
const argvOf = (c, build, io) => (c.rowdeck ? [process.execPath, build.cli, ...c.rowdeck(io)] : c.cmd(io));
const ioOf = (c, build) => ({ input: paths[c.input], out: join(scratch, `${c.name}-${build.label}`.replace(/[^\w.-]/g, '_')) });

/** Why a case cannot run now (disk or memory short), or null. */
function shortOf(c) {
  const bytes = statSync(paths[c.input]).size;
  const disk = c.needs?.disk?.(bytes);
  if (disk) {
    const free = freeBytes(scratch);
    if (free < disk) return `needs ~${(disk / 1e9).toFixed(1)} GB free on the disk of ${scratch}, ${(free / 1e9).toFixed(1)} GB free`;
  }
  const mem = c.needs?.memory?.(bytes);
  if (mem) {
    const avail = availableMemory();
    if (avail < mem) return `needs ~${(mem / 1e9).toFixed(1)} GB of memory, ${(avail / 1e9).toFixed(1)} GB available`;
  }
  return null;
}

const order = schedule(runnable, runs, builds);
const samples = {}; // `${name} ${build}` -> samples
const facts = {};
const failed = {};
const key = (e) => `${e.name} ${e.build}`;

function runEntry(e, phase) {
  const c = byName[e.name];
  if (failed[c.name] || skipped[c.name]) return;
  const short = shortOf(c);
  if (short) {
    // Short before the warm-up: the case is skipped; later: this round's sample is.
    if (phase === 'warm-up') skipped[c.name] = short;
    console.error(`skip ${e.name}${builds.length > 1 && c.rowdeck ? ` [${e.build}]` : ''} (${phase}): ${short}`);
    return;
  }
  const build = buildOf[e.build];
  const io = ioOf(c, build);
  const s = measure(argvOf(c, build, io), { tools, scratch });
  if (c.rowdeck) facts[key(e)] = manifestFacts(io.out) ?? facts[key(e)];
  s.outBytes = outputBytes(io.out);
  rmSync(io.out, { recursive: true, force: true });
  const label = `${phase} ${e.name}${builds.length > 1 && c.rowdeck ? ` [${e.build}]` : ''}`;
  if (!s.ok) {
    failed[c.name] = `exit ${s.status}: ${s.error}`;
    console.error(`${label}: FAILED (${failed[c.name].trim().split('\n').slice(-3).join(' / ')})`);
    return;
  }
  const extra = [s.peakRssMiB !== null ? `${s.peakRssMiB.toFixed(0)} MiB` : null, s.writtenBytes !== null ? `${(s.writtenBytes / 1e9).toFixed(2)} GB written` : null].filter(Boolean);
  console.error(`${label}: ${s.wallS.toFixed(2)} s${extra.length ? ` (${extra.join(', ')})` : ''}`);
  if (phase !== 'warm-up') (samples[key(e)] ??= []).push(s);
}

for (const e of order.warmup) runEntry(e, 'warm-up');
order.rounds.forEach((round, r) => {
  for (const e of round) runEntry(e, `round ${r + 1}/${runs}`);
});
machine.freshWrite.push(freshWriteCost(scratch));
cleanScratch();
machine.loadAverageEnd = loadavg().map((x) => Math.round(x * 100) / 100);

// Summaries, for build A and (with --compare) B.
const summaries = {}; // label -> name -> summary
for (const c of runnable) {
  for (const b of builds) {
    const got = samples[`${c.name} ${b.label}`];
    if (!got?.length) continue;
    (summaries[b.label] ??= {})[c.name] = { ...summarize(got, statSync(paths[c.input]).size), inputBytes: statSync(paths[c.input]).size, input: paths[c.input].replace(`${root}/`, ''), facts: facts[`${c.name} ${b.label}`] ?? null };
  }
}
const budgets = {};
for (const c of runnable) {
  const f = facts[`${c.name} A`];
  budgets[c.name] = typeof c.budget === 'number' ? c.budget : c.budget === 'default' ? (f?.budget ?? (await defaultBudget(builds[0]))) : null;
}
const f = (name) => summaries.A?.[name] ?? null;
const figureValues = figureList({ budgetOf: (name) => budgets[name] ?? null })
  .filter((x) => runnable.some((c) => c.groups.includes(x.group)))
  .map((x) => {
    const value = x.of(f, 'median');
    const met = value === null ? null : x.max !== undefined ? value <= x.max : x.atLeast !== undefined ? value >= x.atLeast : null;
    return { group: x.group, text: x.text, value, fromMin: x.wall ? x.of(f, 'min') : null, max: x.max ?? null, atLeast: x.atLeast ?? null, met };
  });

const rowsOf = (list) =>
  list.flatMap((c) => builds.filter((b) => summaries[b.label]?.[c.name]).map((b) => ({ name: c.name, build: c.rowdeck ? b.label : '', s: summaries[b.label][c.name], budget: budgets[c.name], facts: summaries[b.label][c.name].facts })));

console.log(`\n${machineLine(machine)}\n${busyNote(machine) ? `${busyNote(machine)}\n` : ''}`);
console.log(casesTable(rowsOf(runnable), { withBuild: builds.length > 1 }));
const shownFigures = figureValues.filter((v) => v.value !== null);
if (shownFigures.length) console.log(`\n${figuresTable(shownFigures)}`);
const pairs = builds.length > 1 ? runnable.filter((c) => summaries.A?.[c.name] && summaries.B?.[c.name]).map((c) => ({ name: c.name, a: summaries.A[c.name], b: summaries.B[c.name] })) : [];
if (pairs.length) console.log(`\n${compareTable(pairs, [`A (${machine.builds[0].commit})`, `B (${machine.builds[1].commit})`])}`);
const notes = [...Object.entries(skipped).map(([n, why]) => `skipped ${n}: ${why}`), ...Object.entries(failed).map(([n, why]) => `FAILED ${n}: ${why.trim().split('\n').slice(-3).join(' / ')}`)];
if (notes.length) console.log(`\n${notes.join('\n')}`);

const report = {
  machine,
  options: { groups, only: only ?? null, runs, quick, compare: other ? builds[1].cli : null },
  order: 'one untimed warm-up of every command, then rounds of every command once each, each run after sync',
  cases: Object.fromEntries(runnable.map((c) => [c.name, { groups: c.groups, budget: budgets[c.name], ...Object.fromEntries(builds.map((b) => [b.label, summaries[b.label]?.[c.name] ?? null])) }])),
  figures: figureValues,
  skipped,
  failed,
};
const resultsDir = join(root, 'bench', 'results');
mkdirSync(resultsDir, { recursive: true });
writeFileSync(join(resultsDir, 'last-run.json'), JSON.stringify(report, null, 2) + '\n');

// Report groups run in full (every case of the group selected), on the real files, one build.
if (!quick && !only && builds.length === 1) {
  for (const [g, meta] of Object.entries(reportGroups)) {
    const members = all.filter((c) => c.groups.includes(g));
    if (!members.every((c) => selected.includes(c))) continue;
    const ran = runnable.filter((c) => c.groups.includes(g));
    const entry = {
      machine,
      runs,
      cases: Object.fromEntries(ran.filter((c) => summaries.A?.[c.name]).map((c) => [c.name, { budget: budgets[c.name], ...summaries.A[c.name] }])),
      figures: figureValues.filter((v) => v.group === g),
      skipped: Object.fromEntries(members.filter((c) => skipped[c.name]).map((c) => [c.name, skipped[c.name]])),
      failed: Object.fromEntries(members.filter((c) => failed[c.name]).map((c) => [c.name, failed[c.name]])),
    };
    mergeLatest(join(resultsDir, 'latest.json'), g, entry);
    const groupNotes = [...Object.entries(entry.skipped).map(([n, why]) => `Skipped ${n}: ${why}.`), ...Object.entries(entry.failed).map(([n]) => `${n} failed (see bench/results/latest.json).`)];
    const body = `Generated by \`npm run bench${g === 'core' ? '' : ` -- --group ${g}`}\` (bench/run.mjs) from bench/results/latest.json — do not edit by hand.

Machine: ${machineLine(machine)}.${busyNote(machine) ? ` ${busyNote(machine)}` : ''}
One untimed warm-up of every command, then ${runs} rounds that each run every command once, in the order below, each after \`sync\`. Wall time: min, median and max of the rounds; CPU times and bytes written: medians; peak RSS: the largest (GNU time); written: \`write_bytes\` of /proc/PID/io (what the run handed to the page cache for the disk, spill included, even where removed before it was written back); buckets: from the run's manifest.

${casesTable(rowsOf(ran), { withBuild: false })}

${figuresTable(entry.figures.filter((v) => v.value !== null))}${groupNotes.length ? `\n\n${groupNotes.join('\n')}` : ''}`;
    writeDocSection(join(root, 'docs', 'benchmarks.md'), meta.marker, meta.heading, body);
    console.error(`wrote the ${g} section of docs/benchmarks.md and bench/results/latest.json`);
  }
}
if (Object.keys(failed).length) process.exitCode = 1;
