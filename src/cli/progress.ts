/**
 * A one-line progress display on stderr: stage, amount done, records, MB/s and ETA. Redrawn at
 * most every 200 ms, only when stderr is a terminal; silent otherwise.
 */
import type { ProgressEvent } from '../options.js';

export function createProgress(stream: NodeJS.WritableStream & { isTTY?: boolean }, enabled: boolean): { update(e: ProgressEvent): void; done(): void } {
  let last = 0;
  let shown = false;
  if (!enabled || !stream.isTTY) return { update() {}, done() {} };
  return {
    update(e) {
      const now = Date.now();
      if (now - last < 200 && e.done < e.total) return;
      last = now;
      const frac = e.total > 0 ? Math.min(1, e.done / e.total) : 0;
      const width = 24;
      const bar = '#'.repeat(Math.round(frac * width)).padEnd(width, '.');
      const secs = e.elapsedMs / 1000;
      let rate = '';
      if (e.stage === 'scatter' && secs > 0) rate = ` ${(e.done / 1e6 / secs).toFixed(0)} MB/s`;
      const eta = frac > 0.02 && frac < 1 ? ` ETA ${Math.max(0, (secs / frac) * (1 - frac)).toFixed(0)}s` : '';
      const unit = e.stage === 'gather' ? `${e.done}/${e.total} buckets` : e.stage === 'stats' || e.stage === 'order' ? `${e.done}/${e.total} parts` : e.total > 0 ? `${formatBytes(e.done)}/${formatBytes(e.total)}` : formatBytes(e.done);
      stream.write(`\r${e.stage.padEnd(7)} [${bar}] ${unit} ${e.records.toLocaleString('en-US')} records${rate}${eta}\x1b[K`);
      shown = true;
    },
    done() {
      if (shown) stream.write('\r\x1b[K');
    },
  };
}

/** 12.3 MB, 850 kB, 1.2 GB: three significant figures at most. */
export function formatBytes(n: number): string {
  if (n >= 1e9) return `${(n / 1e9).toFixed(n >= 1e10 ? 0 : 1)} GB`;
  if (n >= 1e6) return `${(n / 1e6).toFixed(n >= 1e7 ? 0 : 1)} MB`;
  if (n >= 1e3) return `${(n / 1e3).toFixed(0)} kB`;
  return `${n} B`;
}
