import { afterEach, describe, expect, it } from 'vitest';
import type { EngineSettings } from '../../src/engine/dualPath.js';
import type { DecisionRecord, RunEvent } from '../../src/run/record.js';
import { Run } from '../../src/run/run.js';
import { decodeState, encodeState } from '../../src/run/state.js';
import { settings } from '../helpers/engine.js';
import { bandLimited, through, white } from '../helpers/signals.js';

// A run's state taken between two blocks and put into a new run of the same settings: the new
// run goes on bit for bit as the original did (outputs, decision records, events). This is what
// lets a captured episode replay to the decisions it made live. The reference here is the
// original run itself; the claim is exact equality.

const N = 24_000;
const x = bandLimited(N, 0.02, 0.35, 0.2, 501);
const d = through(Array.from({ length: 24 }, (_, k) => 0.7 * 0.85 ** k * Math.cos(0.9 * k)), x, white(N, 0.003, 502));

interface Tape {
  clean: Float64Array;
  adaptive: Float64Array;
  records: DecisionRecord[];
  events: RunEvent[];
}

function tape(): { tape: Tape; sink: ConstructorParameters<typeof Run>[2][number] } {
  const t: Tape = { clean: new Float64Array(0), adaptive: new Float64Array(0), records: [], events: [] };
  const clean: number[] = [];
  const adaptive: number[] = [];
  return {
    tape: t,
    sink: {
      onRecord: (r) => t.records.push(r),
      onEvent: (e) => t.events.push(e),
      onBlock: (c, a, n) => {
        for (let i = 0; i < n; i++) clean.push(c[i]!), adaptive.push(a[i]!);
        t.clean = Float64Array.from(clean);
        t.adaptive = Float64Array.from(adaptive);
      },
    },
  };
}

/** Feeds [from, to) in blocks of `block` frames. */
function feed(run: Run, from: number, to: number, block: number): void {
  for (let i = from; i < to; i += block) {
    const m = Math.min(block, to - i);
    run.process(x.subarray(i, i + m), d.subarray(i, i + m), m);
  }
}

const CASES: [string, EngineSettings][] = [
  ['float64 NLMS', settings({ taps: 32 })],
  ['float64 LMS, leak and mean removal', settings({ algorithm: 'lms', taps: 32, step: 0.02, leak: 0.01, meanRemovalEvery: 300 })],
  ['float64 NLMS with noise injection', settings({ taps: 32, noiseInjectionDb: -50, noiseSeed: 9 })],
  ['float32 NLMS', settings({ taps: 33, arithmetic: 'float32' })],
  ['q15 LMS, truncating, leakShift', settings({ algorithm: 'lms', taps: 31, step: 0.05, arithmetic: 'q15', rounding: 'truncate', leakShift: 12 })],
  ['q31 NLMS with mean removal', settings({ taps: 32, arithmetic: 'q31', meanRemovalEvery: 500 })],
  ['pbfdaf, constrained', settings({ algorithm: 'pbfdaf', taps: 64, step: 0.3, blockSize: 32, constrained: true })],
];

describe('a run continues exactly from an exported state', () => {
  const saved = process.env['TAPWARDEN_KERNELS'];
  afterEach(() => {
    if (saved === undefined) delete process.env['TAPWARDEN_KERNELS'];
    else process.env['TAPWARDEN_KERNELS'] = saved;
  });

  for (const kernels of ['fast', 'reference'] as const) {
    for (const [name, s] of CASES) {
      it(`${name} (${kernels} kernels), cut mid-window and mid-crossfade`, () => {
        process.env['TAPWARDEN_KERNELS'] = kernels;
        // Cut at a block boundary that is not a window boundary (windows are 800 samples).
        const cut = 10_000 + 37;
        const whole = tape();
        const original = new Run(s, 1, [whole.sink], 256);
        feed(original, 0, cut, 256);
        const state = decodeState(JSON.parse(JSON.stringify(encodeState(original.exportState()))));
        const before = whole.tape.records.length;
        const beforeEvents = whole.tape.events.length;
        feed(original, cut, N, 256);

        const resumed = tape();
        const copy = new Run(s, 1, [resumed.sink], 4096);
        copy.importState(state);
        feed(copy, cut, N, 1000);
        expect(resumed.tape.records.length).toBeGreaterThan(10);
        expect(resumed.tape.records).toEqual(whole.tape.records.slice(before));
        expect(resumed.tape.events).toEqual(whole.tape.events.slice(beforeEvents));
        expect(Buffer.from(resumed.tape.clean.buffer).equals(Buffer.from(whole.tape.clean.subarray(cut).slice().buffer))).toBe(true);
        expect(Buffer.from(resumed.tape.adaptive.buffer).equals(Buffer.from(whole.tape.adaptive.subarray(cut).slice().buffer))).toBe(true);
      });
    }
  }

  it('refuses a state from a run of other settings, naming the field', () => {
    const a = new Run(settings({ taps: 32 }), 1, [], 256);
    feed(a, 0, 1000, 256);
    const b = new Run(settings({ taps: 16 }), 1, [], 256);
    expect(() => b.importState(a.exportState())).toThrow(/the state does not fit this run at engine\.\S+ \(\w+\[\d+\] here, \w+\[\d+\] in the state\)/);
  });
});
