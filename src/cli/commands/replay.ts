import { join } from 'node:path';
import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { DEMO_RECORDING, writeDemo } from '../../demo/write.js';
import { replay } from '../../replay/run.js';
import { formatSummary } from '../../replay/summary.js';
import type { Command } from '../command.js';
import { progressBar } from '../progress.js';

export const replayCommand: Command = {
  summary: 'run a recording through the engine and write outputs and a summary',
  usage: `Usage: tapwarden replay [REC.wav] [--config FILE] [--out DIR]

Runs the dual-path engine over a recording as fast as the CPU allows and writes
DIR/summary.json, DIR/clean.wav (the output path) and DIR/adaptive.wav (the adapting path).
With no REC, replays the demo bench recording (written to DIR first) with the embedded default.

Options:
  --config FILE  YAML overriding config/default.yaml (keys in README.md)
  --out DIR      output directory (default: tapwarden-out)
  -h, --help     this help`,
  options: {
    config: { type: 'string' },
    out: { type: 'string', default: 'tapwarden-out' },
  },
  positionals: [0, 1],
  run(values, positionals) {
    const outDir = values['out'] as string;
    const configFile = values['config'] as string | undefined;
    const config = loadConfig(configFile);
    let recording = positionals[0];
    if (recording === undefined) {
      writeDemo(outDir);
      recording = join(outDir, DEMO_RECORDING);
    }
    const bar = progressBar('replay');
    let summary;
    try {
      summary = replay({
        recording,
        config,
        configFile: configFile ?? DEFAULT_CONFIG_PATH,
        outDir,
        onProgress: (done, total) => bar.update(done, total),
      });
    } finally {
      bar.stop();
    }
    for (const w of summary.warnings) process.stderr.write(`tapwarden: warning: ${w}\n`);
    process.stdout.write(formatSummary(summary, outDir) + '\n');
    return 0;
  },
};
