import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { cli, sox, tmpDir } from '../helpers/tools.js';

/** A decision log without the channel tag (the same channel has another index in another file). */
const untagged = (file: string) =>
  readFileSync(file, 'utf8')
    .trim()
    .split('\n')
    .map((l) => {
      const { channel: _c, ...rest } = JSON.parse(l) as Record<string, unknown>;
      return JSON.stringify(rest);
    });

describe('several measurement channels (input.desiredChannels)', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  const rec = join(dir, 'bench-trial.wav');
  const two = join(dir, 'two-channels.yaml');

  it('each channel runs as its own replay would: SoX cuts a two-channel file per measurement, and the decisions match', () => {
    const r = cli(['replay', rec, '--config', two, '--truth', join(dir, 'bench-trial-signal.wav'), '--out', join(dir, 'multi')]);
    expect(r.status, r.stderr).toBe(0);
    for (const ch of [1, 2]) {
      // SoX (an outside tool) extracts [reference, channel ch]; -D: no dither, the samples stay as they are.
      const cut = join(dir, `cut-${ch}.wav`);
      sox('-D', rec, cut, 'remix', '1', String(ch + 1));
      const one = cli(['replay', cut, '--truth', join(dir, 'bench-trial-signal.wav'), '--out', join(dir, `one-${ch}`)]);
      expect(one.status, one.stderr).toBe(0);
      expect(untagged(join(dir, 'multi', `ch${ch}`, 'decisions.ndjson'))).toEqual(untagged(join(dir, `one-${ch}`, 'decisions.ndjson')));
      const s = JSON.parse(readFileSync(join(dir, 'multi', `ch${ch}`, 'summary.json'), 'utf8'));
      expect(s.channel).toBe(ch);
      expect(readFileSync(join(dir, 'multi', `ch${ch}`, 'clean.wav')).equals(readFileSync(join(dir, `one-${ch}`, 'clean.wav')))).toBe(true);
    }
    expect(existsSync(join(dir, 'multi', 'report.html'))).toBe(true);
    // The worst channel by the README's rule: lowest verdict, then healthy share, then median.
    const healthy = [1, 2].map((ch) => JSON.parse(readFileSync(join(dir, 'multi', `ch${ch}`, 'summary.json'), 'utf8')).judgement.healthyShare as number);
    const worst = healthy[0]! <= healthy[1]! ? 1 : 2;
    expect(r.stdout).toMatch(new RegExp(`^worst\\s+channel ${worst} \\(`, 'm'));
  });

  it('several policies compare per channel, each against the baseline\'s same channel', () => {
    // The policies overlay the --config file and leave its input alone.
    writeFileSync(join(dir, 'base.yaml'), 'supervisor:\n  marginDb: 3\n');
    writeFileSync(join(dir, 'slow.yaml'), 'supervisor:\n  passesRequired: 12\n');
    const r = cli(['replay', rec, '--config', two, '--policy', join(dir, 'base.yaml'), '--policy', join(dir, 'slow.yaml'), '--gate', 'base', '--out', join(dir, 'cmp')]);
    expect([0, 8], r.stderr).toContain(r.status);
    const c = JSON.parse(readFileSync(join(dir, 'cmp', 'comparison.json'), 'utf8'));
    expect(c.policies.map((p: { name: string }) => p.name)).toEqual(['base/ch1', 'base/ch2', 'slow/ch1', 'slow/ch2']);
    expect(Object.keys(c.gate.worse)).toEqual(['slow/ch1', 'slow/ch2']);
    expect(Object.keys(c.worstChannels)).toEqual(['base', 'slow']);
    expect(existsSync(join(dir, 'cmp', 'slow', 'ch2', 'summary.json'))).toBe(true);
    expect(r.stdout).toMatch(/^base\/ch1 .*\(baseline\)/m);
  });

  it('the demo rig: on the motor alone the flange keeps the pump; with both references both channels cancel about 40 dB (README "The demo bench")', () => {
    const median = (out: string, ch: number) => JSON.parse(readFileSync(join(dir, out, `ch${ch}`, 'summary.json'), 'utf8')).cancellation.clean.medianDb as number;
    expect(cli(['replay', rec, '--config', join(dir, 'rig.yaml'), '--out', join(dir, 'rig')]).status).toBe(0);
    expect(cli(['replay', rec, '--config', two, '--out', join(dir, 'motor-only')]).status).toBe(0);
    expect(median('rig', 1)).toBeGreaterThanOrEqual(39);
    expect(median('rig', 2)).toBeGreaterThanOrEqual(39);
    expect(median('motor-only', 2)).toBeLessThan(10);
    const rig = JSON.parse(readFileSync(join(dir, 'rig', 'ch2', 'summary.json'), 'utf8'));
    expect(rig.weights.clean).toHaveLength(2 * 64); // the motor's filter, then the pump's
  });

  it('analyze --channel picks the measurement channel the coherence and the leak are for', () => {
    const a1 = cli(['analyze', rec, '--config', two, '--out', join(dir, 'an1')]);
    const a2 = cli(['analyze', rec, '--config', two, '--channel', '2', '--out', join(dir, 'an2')]);
    expect(a1.status, a1.stderr).toBe(0);
    expect(a2.status, a2.stderr).toBe(0);
    const j1 = JSON.parse(readFileSync(join(dir, 'an1', 'analysis.json'), 'utf8'));
    const j2 = JSON.parse(readFileSync(join(dir, 'an2', 'analysis.json'), 'utf8'));
    expect([j1.channel, j2.channel]).toEqual([1, 2]);
    // The same reference (its spectrum over the whole selection), another measurement (the
    // coherence; and the fault windows, found on the measurement, so R may differ a little).
    expect(j2.spectrum.psd).toEqual(j1.spectrum.psd);
    expect(j2.coherence).not.toEqual(j1.coherence);
    const bad = cli(['analyze', rec, '--config', two, '--channel', '3', '--out', join(dir, 'an3')]);
    expect(bad.status).toBe(2);
    expect(bad.stderr.trim()).toMatch(/--channel "3" is not allowed; allowed: a measurement channel of the config \(1, 2\) \[TW_ERR_USAGE\]$/);
  });

  it('refuses the reference among them, a channel the file lacks, and a freeze of several', () => {
    writeFileSync(join(dir, 'self.yaml'), 'input:\n  desiredChannels: [1, 0]\n');
    const a = cli(['replay', rec, '--config', join(dir, 'self.yaml'), '--out', join(dir, 'x')]);
    expect(a.status).toBe(2);
    expect(a.stderr.trim()).toMatch(/input\.desiredChannels = \[1,0\] is not allowed; allowed: channels other than input\.referenceChannel \(0\)/);
    writeFileSync(join(dir, 'far.yaml'), 'input:\n  desiredChannels: [1, 5]\n');
    const b = cli(['replay', rec, '--config', join(dir, 'far.yaml'), '--out', join(dir, 'y')]);
    expect(b.status).toBe(3);
    expect(b.stderr.trim()).toMatch(/has 4 channel\(s\) \(0\.\.3\) but input\.desiredChannels\[1\] = 5 \[TW_ERR_WAV_CHANNEL\]$/);
    writeFileSync(join(dir, 'dup.yaml'), 'input:\n  desiredChannels: [1, 1]\n');
    expect(cli(['replay', rec, '--config', join(dir, 'dup.yaml'), '--out', join(dir, 'z')]).stderr).toMatch(/input\.desiredChannels = \[1,1\] is not allowed/);
    writeFileSync(join(dir, 'q15-two.yaml'), 'input:\n  desiredChannels: [1, 2]\nfilter:\n  algorithm: lms\n  step: 0.05\n  arithmetic: q15\n  leakShift: 14\n');
    const f = cli(['freeze', '--config', join(dir, 'q15-two.yaml'), rec, '--out', join(dir, 'fw')]);
    expect(f.status).toBe(2);
    expect(f.stderr.trim()).toMatch(/a frozen filter is one channel's; allowed: one measurement channel/);
  });

  it('a sweep cell is judged by its worst channel and keeps every channel\'s figures', () => {
    const r = cli(['sweep', rec, '--config', two, '--vary', 'filter.step=0.2,0.5', '--jobs', '1', '--out', join(dir, 'sw')]);
    expect(r.status, r.stderr).toBe(0);
    const sweep = JSON.parse(readFileSync(join(dir, 'sw', 'sweep.json'), 'utf8'));
    const key = /^cells\/(\w+)\/summary\.json$/.exec(sweep.cells[0].figures)![1]!;
    const cell = JSON.parse(readFileSync(join(dir, 'sw', 'cells', key, 'cell.json'), 'utf8'));
    expect(sweep.cells[0].channel).toBe(cell.channel);
    expect(cell.channels.map((c: { channel: number }) => c.channel)).toEqual([1, 2]);
    const [c1, c2] = cell.channels.map((c: { figures: { healthyShare: number } }) => c.figures.healthyShare);
    expect(cell.figures.healthyShare).toBe(Math.min(c1, c2));
    expect(JSON.parse(readFileSync(join(dir, 'sw', 'cells', key, 'summary.json'), 'utf8')).channel).toBe(cell.channel);
    // The report names the worst channel beside each link, and every channel's figures on hover.
    const html = readFileSync(join(dir, 'sw', 'report.html'), 'utf8');
    expect(html).toMatch(new RegExp(`title="[^"]*: ch1 [^"]*; ch2 [^"]*; worst ch${cell.channel}">1<small>ch${cell.channel}</small></a>`));
  });
});
