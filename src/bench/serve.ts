import { execFileSync, spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { WavWriter } from '../io/wav/writer.js';
import { synthetic, type BenchCase } from './engine.js';

const CLI = new URL('../cli/main.js', import.meta.url).pathname;
/** Seconds the service runs before the measurement starts (start-up, the first windows). */
const SETTLE_SECONDS = 3;

/** CPU seconds (user + system, every thread) a process has used, from /proc (Linux). */
function cpuSeconds(pid: number, tick: number): number {
  const fields = readFileSync(`/proc/${pid}/stat`, 'utf8').split(') ')[1]!.split(' ');
  // After "pid (comm) ": state is field 3, utime 14 and stime 15 (proc(5)).
  return (Number(fields[11]) + Number(fields[12])) / tick;
}

/**
 * `tapwarden serve` as a rig runs it: a synthetic 16-bit recording of 10 s at the case's rate,
 * looped and paced in real time, the case's filter, and one GET /metrics a second. Returns the
 * cores the whole process used (every thread: engine, HTTP, runtime) over `seconds`, after
 * SETTLE_SECONDS, or why it could not be measured.
 */
export async function benchServe(c: BenchCase): Promise<{ cores: number } | { skipped: string }> {
  let tick: number;
  try {
    readFileSync('/proc/self/stat');
    tick = Number(execFileSync('getconf', ['CLK_TCK'], { encoding: 'utf8' }).trim()) || 100;
  } catch {
    return { skipped: 'needs /proc and getconf (Linux) to read the process CPU time' };
  }
  const dir = mkdtempSync(join(tmpdir(), 'tapwarden-bench-serve-'));
  try {
    const n = 10 * c.rate;
    const { x, d } = synthetic(n, c.taps);
    const recording = join(dir, 'bench.wav');
    const w = new WavWriter(recording, c.rate, 2, 'pcm16');
    w.write([x, d], n);
    w.close();
    const config = join(dir, 'serve.yaml');
    writeFileSync(
      config,
      `http:\n  port: 0\nfilter:\n  algorithm: ${c.algorithm}\n  taps: ${c.taps}\n  arithmetic: ${c.arithmetic}\n  step: ${c.algorithm === 'lms' ? 0.01 : 0.5}\n` +
        `stream:\n  file: ${recording}\n  pace: realtime\n  loop: true\n`,
    );
    const child = spawn(process.execPath, [CLI, 'serve', '--config', config], { stdio: ['ignore', 'pipe', 'ignore'] });
    try {
      const address = await new Promise<string>((resolve, reject) => {
        const lines = createInterface({ input: child.stdout! });
        lines.on('line', (l) => {
          const m = /"address":"([^"]+)"/.exec(l);
          if (m) resolve(m[1]!);
        });
        child.on('exit', (code) => reject(new Error(`serve exited (${code}) before it listened`)));
      });
      const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));
      await sleep(SETTLE_SECONDS * 1000);
      const before = cpuSeconds(child.pid!, tick);
      const t0 = performance.now();
      for (let s = 0; s < Math.round(c.seconds); s++) {
        await (await fetch(`${address}/metrics`)).text();
        await sleep(1000);
      }
      const wall = (performance.now() - t0) / 1000;
      return { cores: (cpuSeconds(child.pid!, tick) - before) / wall };
    } finally {
      child.kill('SIGKILL');
    }
  } catch (err) {
    return { skipped: `serve could not be measured: ${err instanceof Error ? err.message : String(err)}` };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
