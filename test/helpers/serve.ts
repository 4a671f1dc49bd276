import { spawn, type ChildProcess } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { createInterface } from 'node:readline';

const CLI = new URL('../../dist/cli/main.js', import.meta.url).pathname;

export interface Served {
  proc: ChildProcess;
  base: string;
  logs: Array<Record<string, unknown>>;
  stderr: string[];
  exited: Promise<number | null>;
  /** SIGTERM and wait for exit. */
  stop(): Promise<number | null>;
  get(path: string, init?: RequestInit): Promise<Response>;
  metric(name: string): Promise<number>;
}

/** Starts `tapwarden serve` with the given YAML (port 0) and waits until it listens. */
export async function serveWith(dir: string, yaml: string, env: Record<string, string> = {}): Promise<Served> {
  const config = join(dir, `serve-${Date.now()}-${Math.random().toString(36).slice(2)}.yaml`);
  writeFileSync(config, `http:\n  port: 0\n${yaml}`);
  const proc = spawn(process.execPath, [CLI, 'serve', '--config', config], { env: { ...process.env, ...env }, stdio: ['ignore', 'pipe', 'pipe'] });
  const logs: Array<Record<string, unknown>> = [];
  const stderr: string[] = [];
  const exited = new Promise<number | null>((resolve) => proc.on('exit', (code) => resolve(code)));
  createInterface({ input: proc.stderr! }).on('line', (l) => stderr.push(l));
  const base = await new Promise<string>((resolve, reject) => {
    createInterface({ input: proc.stdout! }).on('line', (line) => {
      try {
        const entry = JSON.parse(line) as Record<string, unknown>;
        logs.push(entry);
        if (entry['msg'] === 'tapwarden serving') resolve(String(entry['address']));
      } catch {
        stderr.push(`stdout: ${line}`);
      }
    });
    void exited.then((code) => reject(new Error(`serve exited with ${code}: ${stderr.join('\n')}`)));
    setTimeout(() => reject(new Error(`serve did not start: ${stderr.join('\n')}`)), 60_000);
  });
  const served: Served = {
    proc,
    base,
    logs,
    stderr,
    exited,
    stop() {
      proc.kill('SIGTERM');
      return exited;
    },
    get: (path, init) => fetch(base + path, init),
    async metric(name) {
      const text = await (await fetch(base + '/metrics')).text();
      const line = text.split('\n').find((l) => l.startsWith(name + ' ') || l.startsWith(name + '{'));
      if (line === undefined) throw new Error(`no metric ${name}`);
      return Number(line.split(' ').at(-1));
    },
  };
  return served;
}

export const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

/** Waits until `check` returns true, polling. */
export async function until(check: () => boolean | Promise<boolean>, timeoutMs = 20_000, what = 'condition'): Promise<void> {
  const end = Date.now() + timeoutMs;
  while (Date.now() < end) {
    if (await check()) return;
    await sleep(50);
  }
  throw new Error(`timed out waiting for ${what}`);
}
