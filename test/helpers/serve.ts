import { spawn, type ChildProcess } from 'node:child_process';
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { createInterface } from 'node:readline';

const CLI = new URL('../../dist/cli/main.js', import.meta.url).pathname;

export interface Served {
  proc: ChildProcess;
  base: string;
  /** Every stdout line, parsed (stdout must hold JSON lines only). */
  logs: Array<Record<string, unknown>>;
  /** stdout lines that were not JSON (there must be none). */
  notJson: string[];
  stderr: string[];
  exited: Promise<number | null>;
  /** SIGTERM and wait for exit (again: the same exit). */
  stop(): Promise<number | null>;
  get(path: string, init?: RequestInit): Promise<Response>;
  metric(name: string): Promise<number>;
  /** Waits for a log line matching `test` (already logged or to come). */
  logged(test: (entry: Record<string, unknown>) => boolean, timeoutMs?: number): Promise<Record<string, unknown>>;
}

/** Every service a test started, so that afterEach can stop whatever a failed test left running. */
const running = new Set<Served>();

/** Stops every service still running (for afterEach / afterAll). */
export async function stopAll(): Promise<void> {
  await Promise.all([...running].map((s) => s.stop()));
}

/** Starts `tapwarden serve` with the given YAML (port 0 unless it has an http section) and waits until it listens. */
export async function serveWith(dir: string, yaml: string, env: Record<string, string> = {}): Promise<Served> {
  const config = join(dir, `serve-${Date.now()}-${Math.random().toString(36).slice(2)}.yaml`);
  // Port 0 (any free port) unless the YAML sets its own http section.
  writeFileSync(config, /^http:/m.test(yaml) ? yaml : `http:\n  port: 0\n${yaml}`);
  const proc = spawn(process.execPath, [CLI, 'serve', '--config', config], { env: { ...process.env, ...env }, stdio: ['ignore', 'pipe', 'pipe'] });
  const logs: Array<Record<string, unknown>> = [];
  const notJson: string[] = [];
  const stderr: string[] = [];
  const waiters: Array<{ test: (e: Record<string, unknown>) => boolean; resolve: (e: Record<string, unknown>) => void }> = [];
  const exited = new Promise<number | null>((resolve) => proc.on('exit', (code) => resolve(code)));
  createInterface({ input: proc.stderr! }).on('line', (l) => stderr.push(l));
  let stopping: Promise<number | null> | null = null;
  let onListening: (address: string) => void = () => {};
  const listening = new Promise<string>((resolve) => (onListening = resolve));
  createInterface({ input: proc.stdout! }).on('line', (line) => {
    let entry: Record<string, unknown>;
    try {
      entry = JSON.parse(line) as Record<string, unknown>;
    } catch {
      notJson.push(line);
      return;
    }
    logs.push(entry);
    if (entry['msg'] === 'tapwarden serving') onListening(String(entry['address']));
    for (const w of [...waiters]) {
      if (w.test(entry)) {
        waiters.splice(waiters.indexOf(w), 1);
        w.resolve(entry);
      }
    }
  });
  let timer: NodeJS.Timeout | undefined;
  const served: Served = {
    proc,
    base: '',
    logs,
    notJson,
    stderr,
    exited,
    stop() {
      stopping ??= (async () => {
        if (proc.exitCode === null && proc.signalCode === null) proc.kill('SIGTERM');
        const code = await exited;
        running.delete(served);
        return code;
      })();
      return stopping;
    },
    get: (path, init) => fetch(served.base + path, init),
    async metric(name) {
      const text = await (await fetch(served.base + '/metrics')).text();
      const line = text.split('\n').find((l) => l.startsWith(name + ' ') || l.startsWith(name + '{'));
      if (line === undefined) throw new Error(`no metric ${name}`);
      return Number(line.split(' ').at(-1));
    },
    logged(test, timeoutMs = 30_000) {
      const had = logs.find(test);
      if (had) return Promise.resolve(had);
      return new Promise((resolve, reject) => {
        const t = setTimeout(() => reject(new Error(`no such log line within ${timeoutMs} ms; stderr: ${stderr.join('\n')}`)), timeoutMs);
        waiters.push({ test, resolve: (e) => (clearTimeout(t), resolve(e)) });
      });
    },
  };
  running.add(served);
  try {
    served.base = await Promise.race([
      listening,
      exited.then((code) => Promise.reject(new Error(`serve exited with ${code}: ${stderr.join('\n')}`))),
      new Promise<string>((_, reject) => (timer = setTimeout(() => reject(new Error(`serve did not start: ${stderr.join('\n')}`)), 60_000))),
    ]);
  } catch (err) {
    await served.stop();
    throw err;
  } finally {
    clearTimeout(timer);
  }
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
