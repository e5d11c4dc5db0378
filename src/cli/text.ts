/** Text for the terminal: widths, cutting and padding by code points, values kept on one line. */

/** Width as a terminal shows it, roughly: one per code point. */
export function widthOf(s: string): number {
  let n = 0;
  for (const _ of s) n++;
  return n;
}

/** Cuts s to at most `max` columns, ending with … when cut. */
export function cutText(s: string, max: number): string {
  if (widthOf(s) <= max) return s;
  return [...s].slice(0, Math.max(0, max - 1)).join('') + '…';
}

export function padEnd(s: string, w: number): string {
  return s + ' '.repeat(Math.max(0, w - widthOf(s)));
}

export function padStart(s: string, w: number): string {
  return ' '.repeat(Math.max(0, w - widthOf(s))) + s;
}

/** Line breaks, tabs and other control characters made visible, so a value stays on one line. */
export function showValue(s: string): string {
  // eslint-disable-next-line no-control-regex
  return s.replace(/[\u0000-\u001f\u007f]/g, (c) => (c === '\n' ? '\\n' : c === '\r' ? '\\r' : c === '\t' ? '\\t' : `\\x${c.charCodeAt(0).toString(16).padStart(2, '0')}`));
}
