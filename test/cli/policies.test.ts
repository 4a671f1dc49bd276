import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadConfig } from '../../src/config/load.js';
import { replay } from '../../src/replay/replay.js';
import { cli, tmpDir } from '../helpers/tools.js';

describe('replaying several policies', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  const rec = join(dir, 'bench-trial.wav');
  writeFileSync(join(dir, 'same.yaml'), 'supervisor:\n  marginDb: 1\n');
  writeFileSync(join(dir, 'sluggish.yaml'), 'supervisor:\n  passesRequired: 12\n');

  it('decodes the recording once for every policy (counting the file reads)', () => {
    const policies = ['bench-trial.yaml', 'same.yaml', 'sluggish.yaml'].map((f) => ({ name: f, config: loadConfig(join(dir, f)), configFile: join(dir, f) }));
    const judge = { minCancellationDb: 6, source: 'test' };
    const one = replay({ recording: rec, policies: policies.slice(0, 1), outDir: join(dir, 'one'), judge });
    const three = replay({ recording: rec, policies, outDir: join(dir, 'three'), judge });
    expect(three.summaries).toHaveLength(3);
    expect(three.reads).toBe(one.reads);
    expect(one.reads).toBe(Math.ceil(640_000 / 4096)); // one read per 4096-frame block
  });

  it('prints the comparison, writes comparison.json and the report; the gate passes when nothing is worse', () => {
    const r = cli(['replay', rec, '--policy', join(dir, 'bench-trial.yaml'), '--policy', join(dir, 'same.yaml'), '--gate', 'bench-trial', '--out', join(dir, 'pass')]);
    expect(r.status).toBe(0);
    expect(r.stdout).toMatch(/^policy\s+healthy\s+median\s+p5\s+worst burst/m);
    expect(r.stdout).toMatch(/bench-trial .* \(baseline\)/);
    expect(r.stdout).toMatch(/same .* not worse/);
    const c = JSON.parse(readFileSync(join(dir, 'pass', 'comparison.json'), 'utf8'));
    expect(c.policies.map((p: { name: string }) => p.name)).toEqual(['bench-trial', 'same']);
    expect(c.policies[0].healthyShare).toBeGreaterThan(0.85);
    expect(readFileSync(join(dir, 'pass', 'report.html'), 'utf8')).toMatch(/^<!doctype html>/);
  });

  it('the gate exits 8 with one line naming what got worse; an unknown baseline is a usage error', () => {
    const r = cli(['replay', rec, '--policy', join(dir, 'bench-trial.yaml'), '--policy', join(dir, 'sluggish.yaml'), '--gate', join(dir, 'bench-trial.yaml'), '--out', join(dir, 'fail')]);
    expect(r.status).toBe(8);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr.trim()).toMatch(/^tapwarden: gate: sluggish is worse than bench-trial \(.*healthy.*\) \[TW_ERR_GATE\]$/);
    const u = cli(['replay', rec, '--policy', join(dir, 'same.yaml'), '--gate', 'nobody', '--out', join(dir, 'x')]);
    expect(u.status).toBe(2);
    expect(u.stderr).toMatch(/--gate nobody is not one of the policies; allowed: same/);
  });
});

describe('analyze on the demo recording', () => {
  it('names the unexcited bands and writes analysis.json', () => {
    const dir = tmpDir();
    cli(['demo', '--out', dir]);
    const r = cli(['analyze', join(dir, 'bench-trial.wav'), '--out', join(dir, 'a')]);
    expect(r.status).toBe(0);
    // The reference is high-passed at 500 Hz and low-passed at 3 kHz (src/demo/scenario.ts).
    const bands = r.stdout.match(/bands with no energy.*?\s{2}(.*)$/m)![1]!;
    const parsed = bands.split(', ').map((b) => b.replace(' Hz', '').split('-').map(Number));
    expect(parsed.some(([lo, hi]) => lo === 0 && hi! > 50 && hi! < 500)).toBe(true);
    expect(parsed.some(([lo, hi]) => lo! > 3000 && lo! < 6000 && hi === 8000)).toBe(true);
    const a = JSON.parse(readFileSync(join(dir, 'a', 'analysis.json'), 'utf8'));
    expect(a.taps).toBe(64);
    expect(a.unexcitedDirections).toBeGreaterThan(0);
    expect(a.leak.candidates.length).toBeGreaterThan(3);
  });
});
