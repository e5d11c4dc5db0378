#!/usr/bin/env node
/**
 * The `rowdeck` command: runs the bundled command line (rowdeck.cjs beside this file, made from
 * main.ts by scripts/bundle.mjs) from V8's code cache of it. scripts/bundle.mjs writes this file
 * as dist/cli/main.cjs (CommonJS, code-cache.ts inlined), the package's bin, and as dist/cli/main.js.
 */
import { fileURLToPath } from 'node:url';
import { compileBundle } from './code-cache.js';

compileBundle(fileURLToPath(new URL('./rowdeck.cjs', import.meta.url))).run();
