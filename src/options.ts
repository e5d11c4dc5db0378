/**
 * The options of every command, checked in one place: src/options/spec.ts holds the machinery
 * (tables, checks, spelling, --help's option list), src/options/input.ts the options every
 * reading command shares, and one module per command its table and resolver. Every rejection is
 * a usage error naming the option as the caller wrote it: `Invalid option --name: expected …,
 * got …` on the command line, `Invalid option "name": …` in the library.
 */
export * from './options/spec.js';
export * from './options/input.js';
export * from './options/shuffle.js';
export * from './options/profile.js';
export * from './options/verify.js';
export * from './options/cluster.js';
