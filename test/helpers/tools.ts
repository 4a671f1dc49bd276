import { execFileSync, spawnSync } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

/** A fresh temporary directory. */
export function tmpDir(prefix = 'tapwarden-test-'): string {
  return mkdtempSync(join(tmpdir(), prefix));
}

/** Runs a Debian tool the tests rely on; a missing tool fails the test with what to install. */
export function tool(cmd: string, args: string[]): string {
  const r = spawnSync(cmd, args, { encoding: 'utf8' });
  if (r.error && (r.error as NodeJS.ErrnoException).code === 'ENOENT') {
    throw new Error(`${cmd} is not installed; scripts/test-deps.sh installs it (Debian package ${cmd === 'promtool' ? 'prometheus' : cmd})`);
  }
  if (r.status !== 0) throw new Error(`${cmd} ${args.join(' ')} failed: ${r.stderr}`);
  return r.stdout + r.stderr;
}

export const sox = (...args: string[]): string => tool('sox', args);

export const CLI = new URL('../../dist/cli/main.js', import.meta.url).pathname;

export interface CliResult {
  status: number;
  stdout: string;
  stderr: string;
}

/** Runs the built CLI as a user would (npm test builds dist/ first). */
export function cli(args: string[], opts: { cwd?: string; env?: Record<string, string>; timeoutMs?: number } = {}): CliResult {
  const r = spawnSync(process.execPath, [CLI, ...args], {
    encoding: 'utf8',
    cwd: opts.cwd,
    env: { ...process.env, ...opts.env },
    timeout: opts.timeoutMs ?? 300_000,
  });
  return { status: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}

export function exec(cmd: string, args: string[]): string {
  return execFileSync(cmd, args, { encoding: 'utf8' });
}
