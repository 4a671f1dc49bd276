import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { expect } from 'vitest';

const DIR = new URL('../golden/', import.meta.url).pathname;

/** Whether this run regenerates the golden files (UPDATE_GOLDEN=1 npm test). */
export const UPDATING = process.env['UPDATE_GOLDEN'] === '1';

/**
 * Compares text with test/golden/<name>, or writes it there under UPDATE_GOLDEN=1. A mismatch
 * fails with the first differing line of each side, and for JSON lines the keys whose values
 * differ, so a reader sees what changed rather than two walls of numbers.
 */
export function expectGolden(name: string, actual: string): void {
  const file = join(DIR, name);
  if (UPDATING) {
    mkdirSync(dirname(file), { recursive: true });
    writeFileSync(file, actual);
    return;
  }
  if (!existsSync(file)) throw new Error(`no golden file ${file}; run UPDATE_GOLDEN=1 npm test to create it`);
  const expected = readFileSync(file, 'utf8');
  if (expected === actual) return;
  const a = actual.split('\n');
  const e = expected.split('\n');
  const at = a.findIndex((line, i) => line !== e[i]);
  const line = at === -1 ? Math.min(a.length, e.length) : at;
  let detail = `golden ${name} differs from line ${line + 1} (${e.length} lines expected, ${a.length} got)\n- ${e[line]?.slice(0, 300)}\n+ ${a[line]?.slice(0, 300)}`;
  try {
    const keys = differingKeys(JSON.parse(e[line]!), JSON.parse(a[line]!));
    if (keys.length) detail += `\nkeys that differ: ${keys.slice(0, 20).join(', ')}`;
  } catch {
    // not JSON lines
  }
  detail += '\n(if the change is intended, regenerate with UPDATE_GOLDEN=1 npm test and review the diff)';
  expect.fail(detail);
}

function differingKeys(x: unknown, y: unknown, path = ''): string[] {
  if (typeof x !== 'object' || x === null || typeof y !== 'object' || y === null) return x === y ? [] : [path || '(value)'];
  const keys = new Set([...Object.keys(x), ...Object.keys(y)]);
  return [...keys].flatMap((k) => differingKeys((x as Record<string, unknown>)[k], (y as Record<string, unknown>)[k], path ? `${path}.${k}` : k));
}
