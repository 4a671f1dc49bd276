import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { CLI, cli, sox, tmpDir } from '../helpers/tools.js';

// The edges a trial produces: samples far beyond full scale, recordings shorter than a window,
// and command lines as people type them.

function expectOneLine(r: { status: number; stderr: string }, pattern: RegExp): void {
  expect(r.status).not.toBe(0);
  const lines = r.stderr.trim().split('\n');
  expect(lines).toHaveLength(1);
  expect(lines[0]).toMatch(pattern);
}

/**
 * Every number in a JSON document is finite (JSON has no Inf/NaN: they would be null), except
 * under `forecast`, whose null means "no forecast" by definition.
 */
function allFinite(v: unknown, path = ''): string[] {
  if (v === null) return [path];
  if (typeof v === 'number') return Number.isFinite(v) ? [] : [path];
  if (Array.isArray(v)) return v.flatMap((x, i) => allFinite(x, `${path}[${i}]`));
  if (typeof v === 'object') return Object.entries(v as object).flatMap(([k, x]) => (k === 'forecast' ? [] : allFinite(x, `${path}.${k}`)));
  return [];
}

describe('finite samples far beyond full scale (a float recorder fed a broken preamp)', () => {
  const dir = tmpDir();
  const rate = 8000;
  const n = 4 * rate;
  const x = bandLimited(n, 0.03, 0.3, 0.2, 901);
  const d = through([0.5, -0.2, 0.1], x, white(n, 0.001, 902));
  const wild = [1e30, -3e38, 2.5e3, 3.4e38];
  for (let i = 0; i < 40; i++) {
    x[rate + 97 * i] = wild[i % 4]!;
    d[2 * rate + 89 * i] = wild[(i + 1) % 4]!;
  }
  const f = join(dir, 'wild.wav');
  const w = new WavWriter(f, rate, 2, 'float32');
  w.write([x, d], n);
  w.close();

  for (const arithmetic of ['float64', 'float32', 'q15']) {
    it(`${arithmetic}: clamps them to +-1000, counts them, and every output and figure stays finite`, () => {
      const cfg = join(dir, `${arithmetic}.yaml`);
      writeFileSync(cfg, `filter:\n  taps: 16\n  arithmetic: ${arithmetic}\n`);
      const out = join(dir, arithmetic);
      const r = cli(['replay', f, '--config', cfg, '--out', out]);
      expect(r.status).toBe(0);
      expect(r.stderr).toMatch(/80 input samples beyond \+-1000 full scale clamped to it \[TW_WARN_INPUT\]/);
      const s = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
      expect(s.outOfRangeSamples).toBe(80);
      expect(s.handoffs.rejectedBy.outOfRange).toBeGreaterThan(0);
      // Every figure is a number (forecasts and quantiles may be null by definition).
      const { drift, cancellation, judgement, ...figures } = s;
      void drift;
      void cancellation;
      void judgement;
      expect(allFinite(figures.series)).toEqual([]);
      expect(allFinite(figures.weights)).toEqual([]);
      expect(s.outputs.nonFiniteSamples).toBe(0);
      // SoX reads both outputs and finds no infinite or NaN sample (SoX 'stats').
      for (const wav of ['clean.wav', 'adaptive.wav']) expect(sox(join(out, wav), '-n', 'stats')).not.toMatch(/nan|inf/i);
    });
  }
});

describe('a recording shorter than one supervisor window', () => {
  it('says plainly that no window completed, and prints no NaN', () => {
    const dir = tmpDir();
    const f = join(dir, 'short.wav');
    sox('-n', '-r', '8000', '-c', '2', '-b', '16', f, 'synth', '0.3', 'pinknoise', 'pinknoise', 'vol', '0.3');
    const r = cli(['replay', f, '--out', join(dir, 'out')]);
    expect(r.status).toBe(0);
    expect(r.stdout).toMatch(/^windows\s+none completed: the recording holds 2400 samples, a 0\.5 s supervisor window needs 4000; no decision was made$/m);
    expect(r.stdout).not.toMatch(/NaN/);
    const s = JSON.parse(readFileSync(join(dir, 'out', 'summary.json'), 'utf8'));
    expect(s.windows).toBe(0);
    expect(s.cancellation.clean.medianDb).toBeNull();
  });
});

describe('command lines as people type them', () => {
  const dir = tmpDir();
  const good = join(dir, 'good.wav');
  sox('-n', '-r', '8000', '-c', '2', '-b', '16', good, 'synth', '3', 'pinknoise', 'pinknoise', 'vol', '0.3');

  it('a negative option value parses (--threshold-db -40)', () => {
    const r = cli(['analyze', good, '--threshold-db', '-40', '--out', join(dir, 'a')]);
    expect(r.status).toBe(0);
    expect(r.stdout).toMatch(/unexcited directions \(< -40 dB re lambda_max\)/);
  });

  it('--gate without --policy is a usage error', () => {
    expectOneLine(cli(['replay', good, '--gate', 'x', '--out', join(dir, 'g')]), /^tapwarden: replay: --gate needs the policies to compare; allowed: .*\[TW_ERR_USAGE\]$/);
  });

  it('an empty config is reported as empty', () => {
    const f = join(dir, 'empty.yaml');
    writeFileSync(f, '\n# nothing here\n');
    expectOneLine(cli(['replay', good, '--config', f, '--out', join(dir, 'e')]), /config .*empty\.yaml: the file is empty; allowed: .*\[TW_ERR_CONFIG_VALUE\]$/);
  });

  it('a YAML warning is one coded line, not a Node warning', () => {
    const f = join(dir, 'tag.yaml');
    writeFileSync(f, 'filter:\n  taps: !taps 32\n');
    const r = cli(['replay', good, '--config', f, '--out', join(dir, 't')]);
    const warnings = r.stderr.split('\n').filter((l) => l.includes('TW_WARN_CONFIG_YAML'));
    expect(warnings).toEqual([expect.stringMatching(/^tapwarden: warning: config .*tag\.yaml: Unresolved tag: !taps \[TW_WARN_CONFIG_YAML\]$/)]);
    expect(r.stderr).not.toMatch(/Warning:|\(node:/);
  });

  it('an error line quotes at most about 80 characters of a bad value', () => {
    const f = join(dir, 'long.yaml');
    writeFileSync(f, `filter:\n  algorithm: ${'x'.repeat(5000)}\n`);
    const r = cli(['replay', good, '--config', f, '--out', join(dir, 'l')]);
    expectOneLine(r, /filter\.algorithm = "x{70,80}… is not allowed; allowed: lms, nlms, pbfdaf/);
    expect(r.stderr.length).toBeLessThan(300);
  });

  it('--out under /proc fails at once with TW_ERR_OUTPUT_WRITE', () => {
    const r = cli(['replay', good, '--out', '/proc/tapwarden-out'], { timeoutMs: 20_000 });
    expectOneLine(r, /^tapwarden: cannot write \/proc\/tapwarden-out: .*\[TW_ERR_OUTPUT_WRITE\]$/);
    expect(r.status).toBe(4);
  });

  it('bench | head -1 exits quietly', () => {
    const r = spawnSync('bash', ['-c', `set -o pipefail; ${process.execPath} ${CLI} bench --taps 64 --seconds 0.05 | head -1`], { encoding: 'utf8' });
    expect(r.stdout.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toBe('');
    expect(r.status).toBe(0);
  });

  it('--from and --to select a part of the recording', () => {
    const r = cli(['replay', good, '--from', '1', '--to', '2.5', '--out', join(dir, 'part')]);
    expect(r.status).toBe(0);
    const s = JSON.parse(readFileSync(join(dir, 'part', 'summary.json'), 'utf8'));
    expect(s.samples).toBe(12000);
    expect(s.range).toEqual({ fromSeconds: 1, toSeconds: 2.5 });
    expectOneLine(cli(['replay', good, '--from', '9', '--out', join(dir, 'p2')]), /--from 9 is not allowed for .*good\.wav; allowed: 0 <= from < 3\.000 s \(its length\) \[TW_ERR_USAGE\]$/);
    expectOneLine(cli(['replay', good, '--from', 'soon', '--out', join(dir, 'p3')]), /--from "soon" is not allowed; allowed: seconds, a number >= 0/);
  });
});
