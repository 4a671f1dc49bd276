import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { copyFileSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { freePort } from '../helpers/ports.js';
import { serveWith, until, type Served } from '../helpers/serve.js';
import { tmpDir, tool } from '../helpers/tools.js';

// A real Prometheus (Debian package `prometheus`) scrapes the service on loopback; promtool
// (same package) checks the exposition, the alert rules and their unit tests.

const deploy = (f: string) => new URL(`../../deploy/${f}`, import.meta.url).pathname;

describe('a real Prometheus scraping tapwarden serve', () => {
  const dir = tmpDir();
  let s: Served;
  let prom: ChildProcess;
  let promUrl: string;

  beforeAll(async () => {
    // The demo, free-running and not looped: every counter ends at a known count.
    s = await serveWith(dir, 'stream:\n  pace: free\n  loop: false\n');
    const port = await freePort();
    promUrl = `http://127.0.0.1:${port}`;
    copyFileSync(deploy('prometheus/tapwarden-rules.yml'), join(dir, 'tapwarden-rules.yml'));
    writeFileSync(
      join(dir, 'prometheus.yml'),
      `global:\n  scrape_interval: 1s\n  evaluation_interval: 1s\nrule_files: [tapwarden-rules.yml]\nscrape_configs:\n  - job_name: tapwarden\n    static_configs:\n      - targets: ['${new URL(s.base).host}']\n`,
    );
    tool('prometheus', ['--version']);
    prom = spawn('prometheus', [`--config.file=${join(dir, 'prometheus.yml')}`, `--storage.tsdb.path=${join(dir, 'tsdb')}`, `--web.listen-address=127.0.0.1:${port}`], {
      stdio: 'ignore',
    });
    await until(async () => (await fetch(`${promUrl}/-/ready`).catch(() => null))?.ok === true, 30_000, 'Prometheus to be ready');
  });

  afterAll(async () => {
    prom?.kill('SIGTERM');
    await s?.stop();
  });

  async function query(q: string): Promise<Array<{ metric: Record<string, string>; value: [number, string] }>> {
    const r = (await (await fetch(`${promUrl}/api/v1/query?query=${encodeURIComponent(q)}`)).json()) as any;
    expect(r.status).toBe('success');
    return r.data.result;
  }

  it('scrapes exactly what the service counted: the demo 640,000 frames, both paths, up = 1', async () => {
    await until(async () => (await query('tapwarden_samples_processed_total'))[0]?.value[1] === '640000', 30_000, 'a scrape after the stream ended');
    expect(await s.metric('tapwarden_samples_processed_total')).toBe(640000);
    expect((await query('up{job="tapwarden"}'))[0]!.value[1]).toBe('1');
    const paths = (await query('tapwarden_cancellation_db')).map((r) => r.metric['path']).sort();
    expect(paths).toEqual(['adaptive', 'clean']);
    // 80 windows of 0.5 s, every one counted once by outcome.
    const decisions = await query('sum(tapwarden_supervisor_decisions_total)');
    expect(Number(decisions[0]!.value[1])).toBe(80);
    const stores = (await query('tapwarden_saturations_total')).map((r) => `${r.metric['path']}/${r.metric['store']}`).sort();
    expect(stores).toEqual(['adaptive/signal', 'adaptive/weights', 'clean/signal']);
  });

  it('loads the alert rules', async () => {
    const r = (await (await fetch(`${promUrl}/api/v1/rules`)).json()) as any;
    const names = r.data.groups.flatMap((g: any) => g.rules.map((x: any) => x.name));
    expect(names).toContain('TapwardenStreamDown');
    expect(r.data.groups[0].rules.every((x: any) => x.health === 'ok')).toBe(true);
  });

  it('promtool check metrics accepts the /metrics text', async () => {
    const text = await (await s.get('/metrics')).text();
    const r = spawnSync('promtool', ['check', 'metrics'], { input: text, encoding: 'utf8' });
    expect(r.stdout + r.stderr).toBe('');
    expect(r.status).toBe(0);
  });

  it('every metric the Grafana dashboard plots is one the service exports', async () => {
    const text = await (await s.get('/metrics')).text();
    await until(async () => (await (await s.get('/metrics')).text()).includes('tapwarden_weight_mean{'), 10_000, 'the first window');
    const dash = readFileSync(deploy('grafana/tapwarden-dashboard.json'), 'utf8');
    const used = new Set(dash.match(/tapwarden_[a-z_]+/g));
    expect(used.size).toBeGreaterThan(8);
    for (const name of used) expect(text, name).toMatch(new RegExp(`^${name}(\\{| )`, 'm'));
  });
});

describe('promtool on the shipped rules', () => {
  it('check rules', () => {
    expect(tool('promtool', ['check', 'rules', deploy('prometheus/tapwarden-rules.yml')])).toMatch(/SUCCESS: 8 rules found/);
  });

  it('the rules fire as their unit tests expect (promtool test rules)', () => {
    expect(tool('promtool', ['test', 'rules', deploy('prometheus/tapwarden-rules.test.yml')])).toMatch(/SUCCESS/);
  });

  it('every metric the rules use is one the service exports', async () => {
    const s = await serveWith(tmpDir(), '');
    try {
      // Per-path gauges appear with the first supervisor window.
      await until(async () => (await (await s.get('/metrics')).text()).includes('tapwarden_weight_mean{'), 10_000, 'the first window');
      const text = await (await s.get('/metrics')).text();
      const rules = readFileSync(deploy('prometheus/tapwarden-rules.yml'), 'utf8');
      for (const name of new Set(rules.match(/tapwarden_[a-z_]+/g))) expect(text, name).toMatch(new RegExp(`^${name}(\\{| )`, 'm'));
    } finally {
      await s.stop();
    }
  });
});
