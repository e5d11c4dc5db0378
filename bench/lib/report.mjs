// Tables of a benchmark run, its JSON, and the generated sections of docs/benchmarks.md.
import { existsSync, readFileSync, writeFileSync } from 'node:fs';

const fix = (x, d = 2) => (x === null || x === undefined || !Number.isFinite(x) ? 'n/a' : x.toFixed(d));
const mb = (bytes) => (bytes === null || bytes === undefined ? 'n/a' : (bytes / 1e6).toFixed(0));
const sizeText = (bytes) => (bytes === null || bytes === undefined ? 'n/a' : bytes >= 2 ** 30 ? `${+(bytes / 2 ** 30).toFixed(2)} GiB` : `${Math.round(bytes / 2 ** 20)} MiB`);

export function machineLine(m) {
  const builds = m.builds.length > 1 ? `; builds: ${m.builds.map((b) => `${b.label} ${b.commit}`).join(', ')}` : `; commit ${m.commit}`;
  return `${m.cpu}, ${m.cores} cores, ${m.memoryGiB} GiB; Linux ${m.kernel}; Node ${m.node}${builds}; ${m.date.slice(0, 10)}; load average at the start ${m.loadAverage.join(' / ')}${m.loadAverageEnd ? `, at the end ${m.loadAverageEnd.join(' / ')}` : ''}${m.freshWrite?.length ? `; writing new pages (a file in 1 MiB writes): ${m.freshWrite.map((x) => `${x} s/GiB`).join(' at the start, ')}${m.freshWrite.length > 1 ? ' at the end' : ''}` : ''}${m.leftOutEnv?.length ? `; commands run without ${m.leftOutEnv.join(', ')}` : ''}`;
}

/** A sentence when other work shared the machine (load average above its core count), else ''. */
export function busyNote(m) {
  const load = Math.max(m.loadAverage[0], ...(m.loadAverageEnd ?? []).slice(0, 1));
  return load > m.cores ? `Other work shared the machine (load average up to ${load} on ${m.cores} cores): wall times spread, so compare ratios within this run only.` : '';
}

/** The table of cases (one row per case and build). */
export function casesTable(rows, { withBuild }) {
  const head = `| case |${withBuild ? ' build |' : ''} input MB | budget | runs | wall s min | median | max | MB/s | user s | sys s | peak RSS MiB | written MB | buckets |`;
  const sep = `|---|${withBuild ? '---|' : ''}---|---|---|---|---|---|---|---|---|---|---|---|`;
  const lines = rows.map(({ name, build, s, budget, facts }) =>
    `| ${name} |${withBuild ? ` ${build} |` : ''} ${mb(s.inputBytes)} | ${budget === null ? '' : sizeText(budget)} | ${s.runs} | ${fix(s.wallS.min)} | ${fix(s.wallS.median)} | ${fix(s.wallS.max)} | ${fix(s.mbPerS, 0)} | ${fix(s.userS)} | ${fix(s.sysS)} | ${fix(s.peakRssMiB, 0)} | ${mb(s.writtenBytes)} | ${facts?.buckets ?? ''} |`,
  );
  return [head, sep, ...lines].join('\n');
}

/** Figures with their goal: met, not met, or no goal. */
export function figuresTable(values) {
  const goal = (v) => (v.max !== null ? `≤ ${v.max}` : v.atLeast !== null ? `≥ ${v.atLeast}` : '');
  const met = (v) => (v.met === null ? '' : v.met ? 'met' : '**not met**');
  const num = (x) => fix(x, Math.abs(x) >= 100 ? 0 : 2);
  const lines = values.map((v) => `| ${v.text} | ${num(v.value)} | ${v.fromMin === null ? '' : num(v.fromMin)} | ${goal(v)} | ${met(v)} |`);
  return ['| figure (same run) | value (medians) | from the minimums | goal | |', '|---|---|---|---|---|', ...lines].join('\n');
}

/** Ratio of this checkout's build to the other, per case measured with both (`--compare`). */
export function compareTable(pairs, labels) {
  const r = (a, b) => (a !== null && b ? fix(a / b) : 'n/a');
  const lines = pairs.map(({ name, a, b }) =>
    `| ${name} | ${fix(a.wallS.median)} | ${fix(b.wallS.median)} | ${r(a.wallS.median, b.wallS.median)} | ${r(a.wallS.min, b.wallS.min)} | ${fix(a.peakRssMiB, 0)} / ${fix(b.peakRssMiB, 0)} | ${mb(a.writtenBytes)} / ${mb(b.writtenBytes)} |`,
  );
  return [
    `| case | ${labels[0]} median s | ${labels[1]} median s | ${labels[0]} / ${labels[1]} (medians) | (minimums) | peak RSS MiB | written MB |`,
    '|---|---|---|---|---|---|---|',
    ...lines,
  ].join('\n');
}

/** Replaces (or appends) the section between `<!-- MARKER:start -->` and `<!-- MARKER:end -->`. */
export function writeDocSection(doc, marker, heading, body) {
  const start = `<!-- ${marker}:start -->`;
  const end = `<!-- ${marker}:end -->`;
  const section = `${start}\n${body}\n${end}`;
  let text = existsSync(doc) ? readFileSync(doc, 'utf8') : '# Benchmarks\n';
  const i = text.indexOf(start);
  const j = text.indexOf(end);
  text = i >= 0 && j > i ? text.slice(0, i) + section + text.slice(j + end.length) : `${text.trimEnd()}\n\n## ${heading}\n\n${section}\n`;
  writeFileSync(doc, text);
}

/**
 * latest.json holds the last complete run of each report group: { groups: { core: {…}, scale: {…} } }.
 * A file in the earlier one-run shape is kept as the core group's entry.
 */
export function mergeLatest(path, group, entry) {
  let latest = { groups: {} };
  if (existsSync(path)) {
    try {
      const old = JSON.parse(readFileSync(path, 'utf8'));
      latest = old.groups ? old : { groups: { core: old } };
    } catch {
      // unreadable: start again
    }
  }
  latest.groups[group] = entry;
  writeFileSync(path, JSON.stringify(latest, null, 2) + '\n');
}
