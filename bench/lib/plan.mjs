// The order of a benchmark run and the figures kept from its samples. Pure functions, so that
// test/bench-harness.test.ts can check them without running anything.

/**
 * The order of a run: one untimed warm-up of every command first, then `runs` rounds that each
 * run every command once, in the cases' order. A case measured with two builds (`--compare`) has
 * its two commands side by side, the first build first in odd rounds and second in even rounds, so
 * that neither always follows the same neighbour.
 * Returns { warmup: [{ name, build }], rounds: [[{ name, build }]] }.
 */
export function schedule(cases, runs, builds) {
  const entries = (round) =>
    cases.flatMap((c) => {
      const bs = c.rowdeck && builds.length > 1 ? builds : builds.slice(0, 1);
      const ordered = round % 2 === 1 ? [...bs].reverse() : bs;
      return ordered.map((b) => ({ name: c.name, build: b.label }));
    });
  return { warmup: entries(0), rounds: Array.from({ length: runs }, (_, r) => entries(r)) };
}

/** Median (mean of the two middle values for an even count); null for no values. */
export function median(xs) {
  const v = xs.filter((x) => x !== null && x !== undefined && Number.isFinite(x)).sort((a, b) => a - b);
  if (v.length === 0) return null;
  const mid = v.length >> 1;
  return v.length % 2 === 1 ? v[mid] : (v[mid - 1] + v[mid]) / 2;
}

const finite = (xs) => xs.filter((x) => x !== null && x !== undefined && Number.isFinite(x));
const minOf = (xs) => (finite(xs).length ? Math.min(...finite(xs)) : null);
const maxOf = (xs) => (finite(xs).length ? Math.max(...finite(xs)) : null);

/**
 * The figures of one case (and build) from its timed samples: wall time's min, median and max;
 * the median of CPU times, faults, bytes written and the output's size; the largest peak RSS (a
 * goal on memory must hold in every run, not in the typical one).
 */
export function summarize(samples, inputBytes) {
  const pick = (k) => samples.map((s) => s[k]);
  const wall = pick('wallS');
  const med = median(wall);
  return {
    runs: samples.length,
    wallS: { min: minOf(wall), median: med, max: maxOf(wall), samples: wall.map((x) => Math.round(x * 1000) / 1000) },
    mbPerS: med ? inputBytes / 1e6 / med : null,
    userS: median(pick('userS')),
    sysS: median(pick('sysS')),
    peakRssMiB: maxOf(pick('peakRssMiB')),
    minorFaults: median(pick('minorFaults')),
    majorFaults: median(pick('majorFaults')),
    writtenBytes: median(pick('writtenBytes')),
    cancelledBytes: median(pick('cancelledBytes')),
    writeCallBytes: median(pick('writeCallBytes')),
    writeCalls: median(pick('writeCalls')),
    outBytes: median(pick('outBytes')),
  };
}
