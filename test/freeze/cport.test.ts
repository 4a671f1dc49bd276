import { spawnSync } from 'node:child_process';
import { readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { cli, tmpDir, tool } from '../helpers/tools.js';

// The generated C port (tapwarden freeze) against tapwarden's own kernels, compiled by gcc, an
// implementation outside the project: `gcc -std=c99 -O2 -Wall -Wextra -Werror` must accept it,
// and check.c must reproduce both paths' outputs, the final weights and the saturation counts
// bit for bit (DEVELOPERS.md "Fixed-point operator sequence", "float32 operator sequence";
// float32 built with -ffp-contract=off: C99 6.5 para 8 and GCC's manual, docs/REFERENCES.md
// "Floating point"). The recording clips at full scale and asks for a gain above 1, so signal
// and weight stores saturate.

const GCC = ['-std=c99', '-O2', '-Wall', '-Wextra', '-Werror'];
let dir = '';
let rec = '';

beforeAll(() => {
  dir = tmpDir('tapwarden-freeze-');
  rec = join(dir, 'clipping.wav');
  const fs = 8000;
  const n = 3 * fs;
  const x = bandLimited(n, 0.02, 0.3, 0.45, 91);
  const h = [0.2, 1.6, -0.5, 0.25, 0.1, -0.05];
  const d = through(h, x, white(n, 0.01, 92));
  // The measurement clips, as a recorder driven too hard does.
  for (let i = 0; i < n; i++) d[i] = Math.max(-1, Math.min(1 - 2 ** -15, d[i]!));
  const w = new WavWriter(rec, fs, 2, 'float32');
  w.write([x, d], n);
  w.close();
});

afterAll(() => {
  if (dir) rmSync(dir, { recursive: true, force: true });
});

interface Case {
  name: string;
  yaml: string;
}

const fixed: Case[] = [];
for (const arithmetic of ['q15', 'q31']) {
  for (const algorithm of ['lms', 'nlms']) {
    for (const rounding of ['nearest', 'truncate']) {
      const step = algorithm === 'lms' ? 0.05 : 0.5;
      fixed.push({
        name: `${arithmetic} ${algorithm} ${rounding}, leak, leakShift and mean removal`,
        yaml: `filter:\n  algorithm: ${algorithm}\n  taps: 12\n  step: ${step}\n  arithmetic: ${arithmetic}\n  rounding: ${rounding}\n  leak: 0.001\n  leakShift: 13\n  meanRemovalEvery: 97\nsupervisor:\n  windowSeconds: 0.25\n  minCancellationDb: 3\n`,
      });
    }
    fixed.push({
      name: `${arithmetic} ${algorithm} truncate, no leak (the drifting form)`,
      yaml: `filter:\n  algorithm: ${algorithm}\n  taps: 31\n  step: ${algorithm === 'lms' ? 0.05 : 0.5}\n  arithmetic: ${arithmetic}\n  rounding: truncate\nsupervisor:\n  windowSeconds: 0.25\n`,
    });
  }
}
const float32: Case[] = ['lms', 'nlms'].map((algorithm) => ({
  name: `float32 ${algorithm}, leak, leakShift, mean removal and a weight limit that clips`,
  yaml: `filter:\n  algorithm: ${algorithm}\n  taps: 13\n  step: ${algorithm === 'lms' ? 0.05 : 0.5}\n  arithmetic: float32\n  leak: 0.001\n  leakShift: 14\n  meanRemovalEvery: 101\n  weightLimit: 1.2\nsupervisor:\n  windowSeconds: 0.25\n  minCancellationDb: 3\n`,
}));

function freezeAndCheck(c: Case, extraFlags: string[]) {
  const out = join(dir, c.name.replace(/[^a-z0-9]+/gi, '-'));
  const config = `${out}.yaml`;
  writeFileSync(config, c.yaml);
  const r = cli(['freeze', '--config', config, rec, '--vector-seconds', '1.5', '--out', out]);
  expect(r.status, r.stderr).toBe(0);
  tool('gcc', [...GCC, ...extraFlags, '-o', join(out, 'check'), join(out, 'check.c'), join(out, 'tapwarden_filter.c')]);
  const run = spawnSync(join(out, 'check'), [join(out, 'vectors')], { encoding: 'utf8' });
  const settings = JSON.parse(readFileSync(join(out, 'settings.json'), 'utf8'));
  return { out, run, settings };
}

describe('the frozen C port reproduces tapwarden bit for bit (gcc)', () => {
  for (const c of fixed) {
    it(c.name, () => {
      const { run, settings } = freezeAndCheck(c, []);
      expect(run.stdout + run.stderr).toMatch(/^ok: 12000 samples/);
      expect(run.status).toBe(0);
      // The recording saturates signal stores (the clipped measurement asks for more than full scale).
      expect(settings.vectors.saturations.signal).toBeGreaterThan(0);
      // A gain of 1.6 cannot be stored in Q15/Q31: the weights clip too, and the port counts them alike.
      expect(settings.vectors.saturations.weights).toBeGreaterThan(0);
    });
  }
  for (const c of float32) {
    it(c.name, () => {
      const { run, settings } = freezeAndCheck(c, ['-ffp-contract=off']);
      expect(run.stdout + run.stderr).toMatch(/^ok: 12000 samples/);
      expect(run.status).toBe(0);
      expect(settings.vectors.saturations.weights).toBeGreaterThan(0);
    });
  }

  it('q15 NLMS on the demo: the clean weights reached on it are frozen, and the port runs from them', () => {
    const demo = join(dir, 'demo');
    expect(cli(['demo', '--out', demo]).status).toBe(0);
    const out = join(dir, 'demo-q15');
    writeFileSync(`${out}.yaml`, 'filter:\n  arithmetic: q15\n');
    const r = cli(['freeze', '--config', `${out}.yaml`, join(demo, 'bench-trial.wav'), '--out', out]);
    expect(r.status, r.stderr).toBe(0);
    const settings = JSON.parse(readFileSync(join(out, 'settings.json'), 'utf8'));
    expect(settings.weights.handoffs).toBeGreaterThan(0);
    expect(settings.weights.clean.some((w: number) => w !== 0)).toBe(true);
    expect(readFileSync(join(out, 'tapwarden_filter.c'), 'utf8')).toContain(settings.weights.clean.slice(0, 8).join(', '));
    tool('gcc', [...GCC, '-o', join(out, 'check'), join(out, 'check.c'), join(out, 'tapwarden_filter.c')]);
    const run = spawnSync(join(out, 'check'), [join(out, 'vectors')], { encoding: 'utf8' });
    expect(run.stdout).toMatch(/^ok: 32000 samples/);
  });

  it('check.c names the first mismatch when an expected word is wrong', () => {
    const { out } = freezeAndCheck(fixed[0]!, []);
    const expected = join(out, 'vectors', 'expected.bin');
    const b = readFileSync(expected);
    b.writeInt32LE(b.readInt32LE(8 * 777 + 4) + 1, 8 * 777 + 4);
    writeFileSync(expected, b);
    const run = spawnSync(join(out, 'check'), [join(out, 'vectors')], { encoding: 'utf8' });
    expect(run.status).toBe(1);
    expect(run.stdout).toMatch(/^mismatch at sample 777: clean output/);
  });
});

describe('freeze refuses what has no port, with one coded line', () => {
  const cases: [string, string, RegExp][] = [
    ['pbfdaf', 'filter:\n  algorithm: pbfdaf\n  taps: 512\n  step: 0.5\n', /pbfdaf has no C port; allowed: lms, nlms \[TW_ERR_FREEZE\]/],
    ['float64', 'filter:\n  arithmetic: float64\n', /float64 has no C port; allowed: q15, q31, float32 \[TW_ERR_FREEZE\]/],
    ['noise injection', 'filter:\n  arithmetic: q15\n  noiseInjectionDb: -60\n', /noiseInjectionDb is set.*\[TW_ERR_FREEZE\]/],
    ['an invalid config', 'filter:\n  arithmetic: q15\n  taps: 0\n', /\[TW_ERR_CONFIG_VALUE\]/],
  ];
  for (const [what, yaml, message] of cases) {
    it(what, () => {
      const config = join(dir, `bad-${what.replace(/ /g, '-')}.yaml`);
      writeFileSync(config, yaml);
      const r = cli(['freeze', '--config', config, rec, '--out', join(dir, 'never')]);
      expect(r.status).toBe(2);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(message);
    });
  }
  it('--vector-seconds out of range', () => {
    const r = cli(['freeze', '--vector-seconds', '0', '--out', join(dir, 'never')]);
    expect(r.status).toBe(2);
    expect(r.stderr).toMatch(/--vector-seconds "0" is not allowed; allowed: seconds, 0 < S <= 600 \[TW_ERR_USAGE\]/);
  });
});
