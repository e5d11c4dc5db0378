/**
 * Every error code the code can raise is documented in docs/errors.md with its exit status
 * (usage codes exit 2, data and environment codes exit 1, as the CLI maps them).
 */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { DATA_CODES, USAGE_CODES } from '../src/errors.js';

const doc = readFileSync(new URL('../docs/errors.md', import.meta.url), 'utf8');

describe('docs/errors.md', () => {
  it.each([...USAGE_CODES.map((c) => [c, 2] as const), ...DATA_CODES.map((c) => [c, 1] as const)])('%s is listed with exit %i', (code, exit) => {
    expect(doc).toMatch(new RegExp(`^\\| \`${code}\` \\| ${exit} \\|`, 'm'));
  });
});
