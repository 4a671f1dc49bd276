import { writeDemo } from '../../demo/write.js';
import type { Command } from '../command.js';

export const demo: Command = {
  summary: 'write the demo bench recording and matching configs',
  usage: `Usage: tapwarden demo [--out DIR]

Writes a synthetic bench trial: bench-trial.wav (16-bit stereo, 16 kHz, 40 s; channel 0 the
reference accelerometer on the drive motor, channel 1 the measurement accelerometer on the
specimen), bench-trial-signal.wav (what a perfect canceller would leave), bench-trial.yaml (the
embedded default config) and two fixed-point configs that show weight drift and its cure.

Options:
  --out DIR   where to write (default: tapwarden-demo)
  -h, --help  this help`,
  options: { out: { type: 'string', default: 'tapwarden-demo' } },
  positionals: [0, 0],
  run(values) {
    for (const f of writeDemo(values['out'] as string)) process.stdout.write(`wrote ${f}\n`);
    return 0;
  },
};
