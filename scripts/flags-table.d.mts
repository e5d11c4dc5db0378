import type { FlagSpec } from '../src/flags.js';

export const BEGIN: string;
export const END: string;
/** The table (Markdown) of `specs`. */
export function flagsTable(specs: readonly FlagSpec[]): string;
/** `doc` with the text between the markers replaced by `table`. */
export function withTable(doc: string, table: string): string;
