import { join } from 'node:path';
import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { TapwardenError, quote } from '../../errors.js';
import type { Command } from '../command.js';

export const freezeCommand: Command = {
  summary: 'freeze a policy for the firmware: integer settings, a C99 port, test vectors',
  usage: `Usage: tapwarden freeze --config P.yaml [--policy OVER.yaml] [REC.wav] [--vector-seconds S] --out DIR

Writes what a firmware team needs to run the policy on the rig:
  DIR/settings.json          every constant in the target's integer domain, the health
                             thresholds, and (with REC) the clean weights reached on REC
  DIR/tapwarden_filter.h/.c  portable C99 of the adaptive path and the clean FIR (q15, q31:
                             integers only; float32: float, compile with -ffp-contract=off)
  DIR/vectors/               S seconds of REC's input (the demo's without REC) and both paths'
                             expected outputs
  DIR/check.c                runs the port on the vectors and reports the first mismatch:
                             cc -std=c99 -O2 -o check check.c tapwarden_filter.c && ./check DIR/vectors

Options:
  --config FILE          the policy (YAML over config/default.yaml); lms or nlms in q15, q31 or float32
  --policy FILE          a policy over --config (e.g. a sweep's best.yaml)
  --vector-seconds S     seconds of test vectors (default 2)
  --out DIR              output directory (default: tapwarden-firmware)
  -h, --help             this help`,
  options: {
    config: { type: 'string' },
    policy: { type: 'string' },
    'vector-seconds': { type: 'string', default: '2' },
    out: { type: 'string', default: 'tapwarden-firmware' },
  },
  positionals: [0, 1],
  async run(values, positionals) {
    const configFile = values['config'] as string | undefined;
    const outDir = values['out'] as string;
    const raw = values['vector-seconds'] as string;
    const vectorSeconds = Number(raw);
    if (raw.trim() === '' || !(vectorSeconds > 0 && vectorSeconds <= 600)) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `freeze: --vector-seconds ${quote(raw)} is not allowed; allowed: seconds, 0 < S <= 600` });
    }
    const policyFile = values['policy'] as string | undefined;
    const config = loadConfig([configFile, policyFile].filter((f): f is string => f !== undefined));
    const [{ freeze }, { DEMO_RECORDING, writeDemo }] = await Promise.all([import('../../freeze/freeze.js'), import('../../demo/write.js')]);
    const recording = positionals[0] ?? null;
    const demo = () => {
      writeDemo(join(outDir, 'demo'));
      return join(outDir, 'demo', DEMO_RECORDING);
    };
    const r = freeze({ config, configFile: policyFile ?? configFile ?? DEFAULT_CONFIG_PATH, recording, demo, outDir, vectorSeconds });
    process.stdout.write(
      `frozen      ${config.filter.algorithm} ${config.filter.taps} taps ${config.filter.arithmetic}${recording ? `, clean weights reached on ${recording}` : ', zero weights'}\n` +
        `vectors     ${r.vectorSamples} samples, a handoff every ${r.handoffEvery}\n` +
        `written     ${r.files.join(', ')}\n` +
        `check with  cc -std=c99 -O2 -o ${join(outDir, 'check')} ${join(outDir, 'check.c')} ${join(outDir, 'tapwarden_filter.c')} && ${join(outDir, 'check')} ${join(outDir, 'vectors')}\n`,
    );
    return 0;
  },
};
