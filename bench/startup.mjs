#!/usr/bin/env node
// CLI start-up: how long `tapwarden --version` and a command line with a config error take,
// beside a bare `node -e 0`, on this machine. Prints the median of N runs of each, in seconds,
// and what tapwarden adds over bare Node. Each command is imported lazily (src/cli/main.ts), so
// neither of these loads the engine, fastify or the audio addon.
//   node bench/startup.mjs [--runs 15]
import { spawnSync } from 'node:child_process';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { parseArgs } from 'node:util';

const { values } = parseArgs({ options: { runs: { type: 'string', default: '15' } } });
const runs = Number(values.runs);
const cli = new URL('../dist/cli/main.js', import.meta.url).pathname;
const dir = mkdtempSync(join(tmpdir(), 'tapwarden-startup-'));
writeFileSync(join(dir, 'bad.yaml'), 'filter:\n  taps: 0\n');

function median(args) {
  const times = [];
  for (let i = 0; i < runs; i++) {
    const t0 = process.hrtime.bigint();
    spawnSync(process.execPath, args, { stdio: 'ignore' });
    times.push(Number(process.hrtime.bigint() - t0) / 1e9);
  }
  times.sort((a, b) => a - b);
  return times[Math.floor(times.length / 2)];
}

const bare = median(['-e', '0']);
const rows = [
  ['node -e 0', bare],
  ['tapwarden --version', median([cli, '--version'])],
  ['tapwarden replay --config bad.yaml', median([cli, 'replay', '--config', join(dir, 'bad.yaml')])],
  ['tapwarden serve --config bad.yaml', median([cli, 'serve', '--config', join(dir, 'bad.yaml')])],
];
console.log(`tapwarden start-up, median of ${runs} runs (seconds)`);
for (const [name, t] of rows) console.log(`${name.padEnd(40)}${t.toFixed(3)}${name === 'node -e 0' ? '' : `   +${(t - bare).toFixed(3)} over node`}`);
