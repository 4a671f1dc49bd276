import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { chromium } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { freePort } from '../helpers/ports.js';
import { CLI, cli, sox, tmpDir, tool } from '../helpers/tools.js';

// tapwarden sweep: every combination on every recording, judged at one threshold, resumable, on
// the local pool or on a BullMQ queue in a real Debian redis-server. The figures of a cell are
// replay's (checked against outside sources in test/cli and test/dsp); here each cell is checked
// against a separate `tapwarden replay` of the same config, and the queued sweep against the
// local one, cell for cell.

const ARTIFACTS = new URL('../../test-artifacts/', import.meta.url).pathname;
let dir = '';
let recA = '';
let recB = '';
let base = '';
const VARY = ['--vary', 'filter.step=0.02,0.05', '--vary', 'filter.leakShift=null,12'];

type Json = Record<string, any>;
const readJson = (f: string): Json => JSON.parse(readFileSync(f, 'utf8'));
const sweepArgs = (out: string, ...more: string[]) => ['sweep', recA, recB, '--config', base, ...VARY, '--out', out, ...more];

beforeAll(() => {
  dir = tmpDir('tapwarden-sweep-');
  expect(cli(['demo', '--out', join(dir, 'demo')]).status).toBe(0);
  recA = join(dir, 'demo', 'bench-trial.wav');
  // A second recording: the demo's last 20 s (a different start, the fault burst included).
  recB = join(dir, 'late.wav');
  sox(recA, recB, 'trim', '20');
  base = join(dir, 'demo', 'q15-drift.yaml');
});

afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

describe('tapwarden sweep on the local pool', () => {
  it('writes every cell and combination; each cell equals a replay of its config; a second run reuses every cell', () => {
    const out = join(dir, 'local');
    const r = cli(sweepArgs(out, '--jobs', '2'));
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/4 combinations x 2 recordings: 8 cells run, 0 reused/);
    const s = readJson(join(out, 'sweep.json'));
    expect(s.cells).toHaveLength(8);
    expect(s.combinations).toHaveLength(4);
    for (const c of s.cells) {
      for (const k of ['healthyShare', 'cleanCancellationMedianDb', 'cleanCancellationP5Db', 'worstBurst', 'handoffsAccepted', 'saturations', 'verdict']) expect(c).toHaveProperty(k);
      expect(readJson(join(out, c.figures)).policy).toBeTypeOf('string');
    }
    // One cell against its own replay (same base threshold: the base config's).
    const cell = s.cells.find((c: Json) => c.recording === recB && c.parameters['filter.step'] === 0.05 && c.parameters['filter.leakShift'] === 12);
    const policy = join(dir, 'cell.yaml');
    writeFileSync(policy, 'filter:\n  step: 0.05\n  leakShift: 12\n');
    const rp = cli(['replay', recB, '--config', base, '--policy', policy, '--policy', base, '--out', join(dir, 'replayed')]);
    expect(rp.status, rp.stderr).toBe(0);
    const replayed = readJson(join(dir, 'replayed', 'comparison.json')).policies.find((p: Json) => p.name === 'cell');
    for (const k of ['healthyShare', 'cleanCancellationMedianDb', 'cleanCancellationP5Db', 'worstBurst', 'handoffsAccepted', 'saturations', 'verdict']) expect(cell[k]).toEqual(replayed[k]);
    // Worst case and median over the two recordings, by nearest rank.
    const combo = s.combinations.find((a: Json) => a.parameters['filter.step'] === 0.05 && a.parameters['filter.leakShift'] === 12);
    const both = s.cells.filter((c: Json) => c.parameters['filter.step'] === 0.05 && c.parameters['filter.leakShift'] === 12);
    expect(combo.worst.cleanCancellationMedianDb).toBe(Math.min(...both.map((c: Json) => c.cleanCancellationMedianDb)));
    expect(combo.median.cleanCancellationMedianDb).toBe(Math.min(...both.map((c: Json) => c.cleanCancellationMedianDb)));
    // The drifting form (no leak) is not the pick; a leaking one is.
    expect(s.best.parameters['filter.leakShift']).toBe(12);
    const again = cli(sweepArgs(out));
    expect(again.status, again.stderr).toBe(0);
    expect(again.stdout).toMatch(/0 cells run, 8 reused/);
    expect(readJson(join(out, 'sweep.json')).cells).toEqual(s.cells);
  });

  it("README's worked example: the pick as best.yaml, frozen with --policy, checked by gcc", () => {
    const out = join(dir, 'local');
    const best = readFileSync(join(out, 'best.yaml'), 'utf8');
    const pick = readJson(join(out, 'sweep.json')).best.parameters;
    expect(best).toContain(`step: ${pick['filter.step']}`);
    expect(best).toContain(`leakShift: ${pick['filter.leakShift']}`);
    const fw = join(dir, 'fw');
    const r = cli(['freeze', '--config', base, '--policy', join(out, 'best.yaml'), recB, '--out', fw]);
    expect(r.status, r.stderr).toBe(0);
    const settings = readJson(join(fw, 'settings.json'));
    expect(settings.constants.leakShift).toBe(pick['filter.leakShift']);
    expect(settings.constants.muQ).toBe(Math.round(pick['filter.step'] * 65536));
    tool('gcc', ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror', '-o', join(fw, 'check'), join(fw, 'check.c'), join(fw, 'tapwarden_filter.c')]);
    expect(spawnSync(join(fw, 'check'), [join(fw, 'vectors')], { encoding: 'utf8' }).stdout).toMatch(/^ok: /);
  });

  it('a recording that cannot be read fails its cells with the coded error, not the sweep', () => {
    const bad = join(dir, 'not-a-wav.wav');
    writeFileSync(bad, 'this is not audio');
    const out = join(dir, 'bad');
    const r = cli(['sweep', recB, bad, '--config', base, '--vary', 'filter.step=0.02,0.05', '--out', out]);
    expect(r.status, r.stderr).toBe(0);
    const s = readJson(join(out, 'sweep.json'));
    const failed = s.cells.filter((c: Json) => c.recording === bad);
    expect(failed).toHaveLength(2);
    for (const c of failed) {
      expect(c.verdict).toBe('failed');
      expect(c.error.code).toBe('TW_ERR_WAV_NOT_RIFF');
    }
    expect(s.cells.filter((c: Json) => c.recording === recB && c.error === null)).toHaveLength(2);
    expect(r.stdout).toMatch(/failed .*not-a-wav\.wav.*\[TW_ERR_WAV_NOT_RIFF\]/);
  });

  it('an LMS step beyond the mean-square bound fails that cell, with the bound', () => {
    const out = join(dir, 'steps');
    const r = cli(['sweep', recB, '--config', base, '--vary', 'filter.step=0.05,50', '--out', out]);
    expect(r.status, r.stderr).toBe(0);
    const cells = readJson(join(out, 'sweep.json')).cells;
    expect(cells.find((c: Json) => c.parameters['filter.step'] === 50).error.code).toBe('TW_ERR_CONFIG_STEP_BOUND');
    expect(cells.find((c: Json) => c.parameters['filter.step'] === 0.05).error).toBeNull();
  });

  it('report.html opens in Chromium with no console error, a heat map square per combination and links to the figures', async () => {
    tool('chromium', ['--version']);
    const browser = await chromium.launch({
      executablePath: '/usr/bin/chromium',
      args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--no-first-run'],
    });
    try {
      const page = await browser.newPage({ viewport: { width: 1200, height: 900 } });
      const errors: string[] = [];
      page.on('console', (m) => m.type() === 'error' && errors.push(m.text()));
      page.on('pageerror', (e) => errors.push(String(e)));
      await page.goto('file://' + join(dir, 'local', 'report.html'));
      expect(await page.locator('table.heat td.hm').count()).toBe(4);
      expect(await page.locator('table.heat td.best').count()).toBe(1);
      const href = await page.locator('table.heat td.hm a').first().getAttribute('href');
      expect(readJson(join(dir, 'local', href!)).policy).toBeTypeOf('string');
      await page.screenshot({ path: join(ARTIFACTS, 'sweep.png'), fullPage: true });
      expect(errors).toEqual([]);
    } finally {
      await browser.close();
    }
  });

  it('three varied keys get the Pareto view', () => {
    const out = join(dir, 'three');
    const r = cli(['sweep', recB, '--config', base, ...VARY, '--vary', 'supervisor.passesRequired=1,3', '--out', out]);
    expect(r.status, r.stderr).toBe(0);
    const html = readFileSync(join(out, 'report.html'), 'utf8');
    expect(html).toContain('svg width');
    expect((html.match(/<circle /g) ?? []).length).toBe(8);
  });
});

describe('bad sweep input: one coded line, non-zero exit', () => {
  const cases: [string, string[], RegExp][] = [
    ['an unknown key', ['--vary', 'filter.stepp=0.1'], /--vary key "filter\.stepp" is not allowed; allowed: a key under filter\. or supervisor\..*\[TW_ERR_USAGE\]/],
    ['a key outside filter. and supervisor.', ['--vary', 'input.desiredChannel=0,1'], /not allowed; allowed: a key under filter\. or supervisor\./],
    ['a value outside the schema', ['--vary', 'filter.taps=16,0'], /filter\.taps=0.*\[TW_ERR_CONFIG_VALUE\]/],
    ['an empty grid', [], /no --vary given.*\[TW_ERR_USAGE\]/],
    ['a bad range', ['--vary', 'filter.step=0.5:0.1:0.1'], /A:B:STEP with numbers A <= B and STEP > 0/],
    ['too many cells without --yes', ['--vary', 'filter.step=0.001:0.5:0.001', '--vary', 'filter.leakShift=10,11,12,13,14'], /2500 cells; allowed: at most 2000 without --yes/],
    ['bad --jobs', ['--vary', 'filter.step=0.1', '--jobs', '0'], /--jobs "0" is not allowed; allowed: an integer from 1 to 256/],
    ['a bad queue URL', ['--vary', 'filter.step=0.1', '--queue', 'http://x'], /--queue "http:\/\/x" is not allowed; allowed: redis:\/\/HOST:PORT/],
  ];
  for (const [what, args, message] of cases) {
    it(what, () => {
      const r = cli(['sweep', recB, '--config', base, ...args, '--out', join(dir, 'never')]);
      expect(r.status).toBe(2);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(message);
    });
  }
  it('a Redis that cannot be reached: exit 9 within seconds, one line', async () => {
    const port = await freePort();
    for (const args of [['sweep', recB, '--vary', 'filter.step=0.1', '--queue', `redis://127.0.0.1:${port}`, '--out', join(dir, 'never')], ['worker', '--queue', `redis://127.0.0.1:${port}`]]) {
      const r = cli(args, { timeoutMs: 20_000 });
      expect(r.status).toBe(9);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(/cannot reach the queue at redis:\/\/127\.0\.0\.1:\d+: connect ECONNREFUSED.*\[TW_ERR_QUEUE\]/);
    }
  });
});

describe('tapwarden sweep --queue on a real redis-server with worker processes', () => {
  let redis: ChildProcess | null = null;
  const workers: ChildProcess[] = [];
  let url = '';

  beforeAll(async () => {
    tool('redis-server', ['--version']);
    const port = await freePort();
    url = `redis://127.0.0.1:${port}`;
    redis = spawn('redis-server', ['--port', String(port), '--bind', '127.0.0.1', '--save', '', '--appendonly', 'no'], { stdio: 'ignore' });
    for (let i = 0; i < 50; i++) {
      if (spawnSync('redis-cli', ['-p', String(port), 'ping'], { encoding: 'utf8' }).stdout.trim() === 'PONG') return;
      await new Promise((r) => setTimeout(r, 100));
    }
    throw new Error('redis-server did not start');
  });

  afterAll(async () => {
    for (const w of workers) w.kill('SIGKILL');
    redis?.kill('SIGKILL');
  });

  const startWorker = (env: Record<string, string> = {}) => {
    const w = spawn(process.execPath, [CLI, 'worker', '--queue', url, '--lock-seconds', '2'], { env: { ...process.env, ...env }, stdio: ['ignore', 'ignore', 'pipe'] });
    let log = '';
    w.stderr!.on('data', (d) => (log += d));
    workers.push(w);
    const ready = new Promise<void>((resolve) => w.stderr!.on('data', () => log.includes('taking sweep batches') && resolve()));
    return { w, ready, log: () => log };
  };

  const runSweep = (out: string) =>
    new Promise<{ status: number | null; stderr: string }>((resolve) => {
      const p = spawn(process.execPath, [CLI, ...sweepArgs(out, '--queue', url)], { stdio: ['ignore', 'ignore', 'pipe'] });
      let stderr = '';
      p.stderr.on('data', (d) => (stderr += d));
      p.on('exit', (status) => resolve({ status, stderr }));
    });

  it('two workers give the same sweep.json as the local pool, cell for cell', async () => {
    const a = startWorker();
    const b = startWorker();
    await Promise.all([a.ready, b.ready]);
    const out = join(dir, 'queued');
    const r = await runSweep(out);
    expect(r.status, r.stderr).toBe(0);
    const local = readJson(join(dir, 'local', 'sweep.json'));
    const queued = readJson(join(out, 'sweep.json'));
    expect(queued.cells).toEqual(local.cells);
    expect(queued.combinations).toEqual(local.combinations);
    expect(queued.best).toEqual(local.best);
    // Both workers took batches.
    expect(a.log()).toMatch(/batch .* done/);
    expect(b.log()).toMatch(/batch .* done/);
    a.w.kill('SIGTERM');
    b.w.kill('SIGTERM');
  });

  it('a worker that dies mid-batch: BullMQ hands the batch to another worker, and the result is the same', async () => {
    const killer = startWorker({ TAPWARDEN_FAULT: 'worker-kill' });
    await killer.ready;
    const out = join(dir, 'retried');
    const done = runSweep(out);
    const died = await new Promise<number | null>((resolve) => killer.w.on('exit', (_code, signal) => resolve(signal === 'SIGKILL' ? 137 : 0)));
    expect(died).toBe(137);
    const healthy = startWorker();
    const r = await done;
    expect(r.status, r.stderr).toBe(0);
    expect(readJson(join(out, 'sweep.json')).cells).toEqual(readJson(join(dir, 'local', 'sweep.json')).cells);
    expect(healthy.log()).toMatch(/batch .* done/);
    healthy.w.kill('SIGTERM');
  });
});
