import { DualPathEngine, type EngineSettings, type WeightSnapshot, type WindowReport } from '../../src/engine/dualPath.js';
import { spec } from './signals.js';
import type { AdaptiveSpec } from '../../src/dsp/types.js';

export function settings(
  filter: Partial<AdaptiveSpec & { noiseInjectionDb: number | null; noiseSeed: number }> = {},
  supervisor: Partial<EngineSettings['supervisor']> = {},
  sampleRate = 8000,
): EngineSettings {
  return {
    sampleRate,
    filter: { ...spec({ algorithm: 'nlms', taps: 16, step: 0.5, delta: 1e-6 }), noiseInjectionDb: null, noiseSeed: 1, ...filter },
    supervisor: {
      windowSeconds: 0.1,
      crossfadeSeconds: 0.005,
      minCancellationDb: 6,
      maxWeightMean: 0.1,
      marginDb: 1,
      passesRequired: 2,
      rollbackAfter: null,
      minReferencePowerDb: null,
      ...supervisor,
    },
    outputSignal: 'error',
  };
}

export interface EngineRun {
  clean: Float64Array;
  adaptive: Float64Array;
  windows: WindowReport[];
  handoffs: WeightSnapshot[];
  engine: DualPathEngine;
}

/** Runs the engine over x, d in blocks whose sizes cycle through `blocks`. */
export function runEngine(s: EngineSettings, x: Float64Array, d: Float64Array, blocks: readonly number[] = [4096]): EngineRun {
  const windows: WindowReport[] = [];
  const handoffs: WeightSnapshot[] = [];
  const engine = new DualPathEngine(s, { onWindow: (r) => windows.push(r), onHandoff: (h) => handoffs.push(h) });
  const clean = new Float64Array(x.length);
  const adaptive = new Float64Array(x.length);
  let i = 0;
  let b = 0;
  while (i < x.length) {
    const m = Math.min(blocks[b++ % blocks.length]!, x.length - i);
    engine.process(x.subarray(i, i + m), d.subarray(i, i + m), clean.subarray(i, i + m), adaptive.subarray(i, i + m), m);
    i += m;
  }
  return { clean, adaptive, windows, handoffs, engine };
}
