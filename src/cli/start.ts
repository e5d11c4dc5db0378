#!/usr/bin/env node
/**
 * The `rowdeck` command: runs the bundled command line (rowdeck.cjs beside this file, made from
 * main.ts by scripts/bundle.mjs) from V8's code cache of it. scripts/bundle.mjs puts this file
 * in place as dist/cli/main.js, the package's bin.
 */
import { fileURLToPath } from 'node:url';
import { compileBundle } from './code-cache.js';

compileBundle(fileURLToPath(new URL('./rowdeck.cjs', import.meta.url))).run();
