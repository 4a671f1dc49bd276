#!/usr/bin/env node
// Measures the CPU use of `tapwarden serve` under a trial-like load: a 48 kHz stereo stream
// paced in real time, 256-tap NLMS, two WebSocket feed clients and a real Prometheus scraping
// /metrics every second. Prints CPU seconds per wall second (1.0 = one core), from the
// service's own process_cpu_seconds_total (all threads) and from /proc.
//
//   node bench/service-load.mjs [--seconds 60] [--taps 256] [--arithmetic float64]
import { spawn, execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { parseArgs } from 'node:util';
import WebSocket from 'ws';

const { values } = parseArgs({ options: { seconds: { type: 'string', default: '60' }, taps: { type: 'string', default: '256' }, arithmetic: { type: 'string', default: 'float64' } } });
const seconds = Number(values.seconds);
const dir = mkdtempSync(join(tmpdir(), 'tapwarden-load-'));
const cli = new URL('../dist/cli/main.js', import.meta.url).pathname;
const sleep = (ms) => new Promise((r) => setTimeout(r, ms));
const freePort = () => new Promise((r) => { const s = createServer().listen(0, '127.0.0.1', () => { const p = s.address().port; s.close(() => r(p)); }); });

const wav = join(dir, 'stream.wav');
execFileSync('sox', ['-n', '-r', '48000', '-c', '2', '-b', '16', wav, 'synth', '30', 'pinknoise', 'pinknoise', 'vol', '0.3']);
writeFileSync(join(dir, 'serve.yaml'), `http:\n  port: 0\nfilter:\n  taps: ${values.taps}\n  arithmetic: ${values.arithmetic}\nstream:\n  file: ${wav}\n  blockFrames: 256\n`);
const svc = spawn(process.execPath, [cli, 'serve', '--config', join(dir, 'serve.yaml')], { stdio: ['ignore', 'pipe', 'inherit'] });
const base = await new Promise((resolve) => createInterface({ input: svc.stdout }).on('line', (l) => { try { const e = JSON.parse(l); if (e.msg === 'tapwarden serving') resolve(e.address); } catch {} }));

const promPort = await freePort();
writeFileSync(join(dir, 'prometheus.yml'), `global:\n  scrape_interval: 1s\nscrape_configs:\n  - job_name: tapwarden\n    static_configs:\n      - targets: ['${new URL(base).host}']\n`);
const prom = spawn('prometheus', [`--config.file=${join(dir, 'prometheus.yml')}`, `--storage.tsdb.path=${join(dir, 'tsdb')}`, `--web.listen-address=127.0.0.1:${promPort}`], { stdio: 'ignore' });
let messages = 0;
const clients = [1, 2].map(() => { const ws = new WebSocket(base.replace('http', 'ws') + '/api/feed'); ws.on('message', () => messages++); return ws; });

const metric = async (name) => Number((await (await fetch(base + '/metrics')).text()).split('\n').find((l) => l.startsWith(name + ' ')).split(' ')[1]);
const procCpu = () => { const f = readFileSync(`/proc/${svc.pid}/stat`, 'utf8').split(') ')[1].split(' '); return (Number(f[11]) + Number(f[12])) / 100; };
await sleep(5000); // warm up: JIT, first windows, first scrapes
const c0 = await metric('process_cpu_seconds_total');
const p0 = procCpu();
const s0 = await metric('tapwarden_samples_processed_total');
const t0 = performance.now();
await sleep(seconds * 1000);
const wall = (performance.now() - t0) / 1000;
const c1 = await metric('process_cpu_seconds_total');
const p1 = procCpu();
const s1 = await metric('tapwarden_samples_processed_total');
const up = await (await fetch(`http://127.0.0.1:${promPort}/api/v1/query?query=up`)).json();
const overruns = await metric('tapwarden_queue_overruns_total');
for (const ws of clients) ws.close();
prom.kill('SIGTERM');
svc.kill('SIGTERM');
console.log(JSON.stringify({
  taps: Number(values.taps), arithmetic: values.arithmetic, sampleRate: 48000, wallSeconds: +wall.toFixed(1),
  cpuCoresByMetric: +((c1 - c0) / wall).toFixed(3), cpuCoresByProc: +((p1 - p0) / wall).toFixed(3),
  samplesPerSecond: Math.round((s1 - s0) / wall), overruns, feedMessagesPerClientPerSecond: +(messages / 2 / (wall + 5)).toFixed(1),
  prometheusUp: up.data?.result?.[0]?.value?.[1] ?? 'none',
}));
