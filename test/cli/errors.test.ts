import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { loadConfig } from '../../src/config/load.js';
import { ERRORS } from '../../src/errors.js';

describe('the error table', () => {
  const readme = readFileSync(new URL('../../README.md', import.meta.url), 'utf8');

  it('every error code is documented in README.md with its exit status and HTTP status', () => {
    for (const [code, def] of Object.entries(ERRORS)) {
      const row = readme.split('\n').find((l) => l.startsWith(`| \`${code}\` |`));
      expect(row, code).toBeDefined();
      const cells = row!.split('|').map((c) => c.trim());
      if (def.exitCode !== 1) expect(cells[2], code).toBe(String(def.exitCode));
      if ('httpStatus' in def) expect(cells[3], code).toBe(String(def.httpStatus));
    }
  });

  it('every config key is documented in README.md', () => {
    const keys = (o: object, prefix: string): string[] =>
      Object.entries(o).flatMap(([k, v]) => (v !== null && typeof v === 'object' && !Array.isArray(v) ? keys(v, `${prefix}${k}.`) : [`${prefix}${k}`]));
    const all = keys(loadConfig(), '');
    expect(all.length).toBeGreaterThan(40);
    for (const key of all) expect(readme, key).toContain(`| \`${key}\` |`);
  });
});
