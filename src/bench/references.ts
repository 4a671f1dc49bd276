import { execFileSync, spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { existsSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { makeDirectory } from '../io/files.js';
import { PACKAGE_ROOT } from '../paths.js';

/** What an outside implementation managed on the same machine in the same run. */
export interface ReferenceResult {
  readonly samplesPerSecond: number;
  readonly realtimeFactor: number;
}

const C_SOURCE = new URL('bench/c/dualpath_nlms.c', PACKAGE_ROOT).pathname;
const NUMPY_SCRIPT = new URL('bench/numpy_nlms.py', PACKAGE_ROOT).pathname;
export const C_FLAGS = ['-O3', '-march=native', '-ffast-math'];

/** Builds the C reference with the system compiler; null (with why) when that is not possible. */
export function buildCReference(): { binary: string } | { skipped: string } {
  const cc = ['cc', 'gcc', 'clang'].find((c) => spawnSync(c, ['--version']).status === 0);
  if (cc === undefined) return { skipped: 'no C compiler (cc, gcc or clang) on this machine' };
  const source = readFileSync(C_SOURCE);
  const dir = join(tmpdir(), 'tapwarden-bench');
  makeDirectory(dir);
  const binary = join(dir, `dualpath_nlms-${createHash('sha256').update(source).update(C_FLAGS.join(' ')).digest('hex').slice(0, 12)}`);
  if (!existsSync(binary)) {
    try {
      execFileSync(cc, [...C_FLAGS, '-o', binary, C_SOURCE], { stdio: 'pipe' });
    } catch (err) {
      return { skipped: `${cc} ${C_FLAGS.join(' ')} failed: ${String((err as { stderr?: Buffer }).stderr ?? err).split('\n')[0]}` };
    }
  }
  return { binary };
}

function runJson(cmd: string, args: string[]): ReferenceResult | null {
  const r = spawnSync(cmd, args, { encoding: 'utf8', timeout: 600_000 });
  if (r.status !== 0) return null;
  try {
    const j = JSON.parse(r.stdout.trim().split('\n').at(-1)!) as ReferenceResult;
    return { samplesPerSecond: j.samplesPerSecond, realtimeFactor: j.realtimeFactor };
  } catch {
    return null;
  }
}

export function runCReference(binary: string, taps: number, seconds: number, rate: number): ReferenceResult | null {
  return runJson(binary, [String(taps), String(seconds), String(rate)]);
}

/** The per-sample numpy script; null when python3 with numpy is not there. */
export function runNumpyReference(taps: number, seconds: number, rate: number): ReferenceResult | null {
  return runJson('python3', [NUMPY_SCRIPT, String(taps), String(seconds), String(rate)]);
}

export function numpyAvailable(): boolean {
  return spawnSync('python3', ['-c', 'import numpy'], { stdio: 'ignore' }).status === 0;
}
