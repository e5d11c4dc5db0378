/**
 * A one-line progress display on stderr: stage, amount done, records, MB/s and ETA. Redrawn at
 * most ten times a second, only when stderr is a terminal; silent otherwise. Where the total is
 * not known (standard input, a pipe), it shows the records and bytes read without a bar.
 */
import type { ProgressEvent } from '../options.js';

/** Least time between two redraws. */
export const REDRAW_MS = 100;

export interface ProgressDisplay {
  update(e: ProgressEvent): void;
  done(): void;
}

export function createProgress(stream: NodeJS.WritableStream & { isTTY?: boolean }, enabled: boolean, now: () => number = Date.now): ProgressDisplay {
  let last = -Infinity;
  let shown = false;
  if (!enabled || !stream.isTTY) return { update() {}, done() {} };
  return {
    update(e) {
      const t = now();
      if (t - last < REDRAW_MS) return;
      last = t;
      stream.write(`\r${formatProgress(e)}\x1b[K`);
      shown = true;
    },
    done() {
      if (shown) stream.write('\r\x1b[K');
    },
  };
}

/** The progress line for one event (without the carriage return and line clearing). */
export function formatProgress(e: ProgressEvent): string {
  const line = formatStage(e);
  // Which layout runs (the multi-pass layout's gather also says how many buckets it split).
  return e.layout ? `${line} [${e.layout}${e.splits ? `, ${e.splits} split` : ''}]` : line;
}

function formatStage(e: ProgressEvent): string {
  const secs = e.elapsedMs / 1000;
  const records = `${e.records.toLocaleString('en-US')} records`;
  const bytes = e.stage === 'scatter' || (e.stage as string) === 'read' || (e.stage as string) === 'bins';
  const rate = bytes && secs > 0 ? ` ${(e.done / 1e6 / secs).toFixed(0)} MB/s` : '';
  if (e.total <= 0) {
    // Nothing to measure against: what has been read so far.
    const amount = bytes ? `${formatBytes(e.done)} read` : `${e.done}`;
    return `${e.stage.padEnd(7)} ${amount}, ${records}${rate}`;
  }
  const frac = Math.min(1, e.done / e.total);
  const width = 24;
  const bar = '#'.repeat(Math.round(frac * width)).padEnd(width, '.');
  const eta = frac > 0.02 && frac < 1 ? ` ETA ${Math.max(0, (secs / frac) * (1 - frac)).toFixed(0)}s` : '';
  const unit = e.stage === 'gather' ? `${e.done}/${e.total} buckets` : e.stage === 'stats' || e.stage === 'order' ? `${e.done}/${e.total} parts` : e.stage === 'plan' ? `${e.done}/${e.total} buckets` : `${formatBytes(e.done)}/${formatBytes(e.total)}`;
  return `${e.stage.padEnd(7)} [${bar}] ${unit} ${records}${rate}${eta}`;
}

/** 12.3 MB, 850 kB, 1.2 GB: three significant figures at most. */
export function formatBytes(n: number): string {
  if (n >= 1e9) return `${(n / 1e9).toFixed(n >= 1e10 ? 0 : 1)} GB`;
  if (n >= 1e6) return `${(n / 1e6).toFixed(n >= 1e7 ? 0 : 1)} MB`;
  if (n >= 1e3) return `${(n / 1e3).toFixed(0)} kB`;
  return `${n} B`;
}
