import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { analyzeExcitation, type ExcitationAnalysis } from '../../analysis/excitation.js';
import { WelchPsd } from '../../analysis/welch.js';
import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { TapwardenError, oneLine } from '../../errors.js';
import { WavReader } from '../../io/wav/reader.js';
import { renderReport } from '../../report/html.js';
import { checkChannels, writeJsonAtomic } from '../../replay/run.js';
import type { Command } from '../command.js';

/** Seconds of the recording the correlation matrices are estimated from. */
const CORRELATION_SECONDS = 60;
/** Largest L for the eigen-decomposition (O(L^3)). */
const MAX_TAPS = 2048;

function table(a: ExcitationAnalysis, rate: number): string {
  const rows: Array<[string, string]> = [
    ['taps', String(a.taps)],
    ['samples used', `${a.samplesUsed} (${(a.samplesUsed / rate).toFixed(1)} s)`],
    ['reference power', `${a.referencePowerDb.toFixed(1)} dB re FS`],
    ['lambda_max', a.lambdaMax.toExponential(3)],
    ['lambda_min', a.lambdaMin.toExponential(3)],
    ['eigenvalue spread', a.eigenvalueSpread === null ? 'unbounded (lambda_min <= 0)' : a.eigenvalueSpread.toExponential(2)],
    [`unexcited directions (< ${a.thresholdDb} dB re lambda_max)`, `${a.unexcitedDirections} of ${a.taps}`],
    ['weight-mean direction excitation', `${a.meanDirectionDb.toFixed(1)} dB re lambda_max`],
    [
      `bands with no energy (< ${a.thresholdDb} dB re peak)`,
      a.unexcitedBands.length ? a.unexcitedBands.map((b) => `${b.loHz.toFixed(0)}-${b.hiHz.toFixed(0)} Hz`).join(', ') : 'none',
    ],
    ['LMS step bound 2/(lambda_max + leak)', a.stepBounds.lms.toPrecision(4)],
    ['LMS practical bound 2/tr R', a.stepBounds.lmsTraceBound.toPrecision(4)],
    ['NLMS step bound', `0 < step < ${a.stepBounds.nlms}`],
  ];
  if (a.leak) {
    rows.push([
      `suggested leak (cancellation loss <= ${a.leak.maxLossDb} dB)`,
      a.leak.suggested === null ? 'none qualifies' : a.leak.suggested.toExponential(2),
    ]);
    for (const c of a.leak.candidates) {
      rows.push([`  leak ${c.leak.toExponential(2)}`, `bias ${(100 * c.relativeBias).toFixed(2)} %, cancellation ${c.cancellationDb.toFixed(1)} dB (loss ${c.lossDb.toFixed(2)} dB)`]);
    }
  }
  const w = Math.max(...rows.map(([k]) => k.length));
  return rows.map(([k, v]) => `${k.padEnd(w)}  ${v}`).join('\n');
}

export const analyze: Command = {
  summary: "analyze a recording's reference: spectrum, eigenvalues, unexcited bands, step bounds, leak",
  usage: `Usage: tapwarden analyze REC.wav [--taps N] [--config FILE] [--threshold-db DB] [--out DIR]

Excitation analysis of the reference channel for an N-tap filter: Welch power spectrum; the
eigenvalues of the N x N autocorrelation matrix, their spread and how many fall below the
threshold relative to lambda_max (directions the input does not excite); the bands with no energy;
the LMS and NLMS step bounds; and, from the desired channel, a suggested leak with the predicted
bias of (R + leak I)^-1 p against the unregularized solution. Prints a table and writes
DIR/analysis.json and DIR/report.html. The matrices use the first ${CORRELATION_SECONDS} s.

Options:
  --taps N           filter length (default: filter.taps of the config), at most ${MAX_TAPS}
  --config FILE      YAML overriding config/default.yaml (channels, leak)
  --threshold-db DB  what counts as unexcited, dB below the peak (default -60)
  --out DIR          output directory (default: tapwarden-analysis)
  -h, --help         this help`,
  options: {
    taps: { type: 'string' },
    config: { type: 'string' },
    'threshold-db': { type: 'string' },
    out: { type: 'string', default: 'tapwarden-analysis' },
  },
  positionals: [1, 1],
  run(values, positionals) {
    const recording = positionals[0]!;
    const configFile = values['config'] as string | undefined;
    const config = loadConfig(configFile);
    const taps = values['taps'] === undefined ? config.filter.taps : Number(values['taps']);
    if (!Number.isInteger(taps) || taps < 1 || taps > MAX_TAPS) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `analyze: --taps ${values['taps']} is not allowed; allowed: an integer 1..${MAX_TAPS}` });
    }
    const thresholdDb = values['threshold-db'] === undefined ? -60 : Number(values['threshold-db']);
    if (!(thresholdDb < 0)) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `analyze: --threshold-db ${values['threshold-db']} is not allowed; allowed: a negative number of dB` });
    }
    const outDir = values['out'] as string;
    const reader = WavReader.open(recording);
    let x: Float64Array;
    let d: Float64Array;
    let psd: WelchPsd;
    try {
      checkChannels(reader, config, recording);
      const rate = reader.format.sampleRate;
      const keep = Math.min(reader.frames, CORRELATION_SECONDS * rate);
      x = new Float64Array(keep);
      d = new Float64Array(keep);
      psd = new WelchPsd(Math.min(8192, Math.max(256, 2 ** Math.ceil(Math.log2(rate / 8)))), rate);
      const block = 8192;
      const r = new Float64Array(block);
      const s = new Float64Array(block);
      const channels = [config.input.referenceChannel, config.input.desiredChannel];
      for (let at = 0; ; ) {
        const n = reader.read(channels, [r, s]);
        if (n === 0) break;
        psd.push(r, n);
        const take = Math.max(0, Math.min(n, keep - at));
        x.set(r.subarray(0, take), at);
        d.set(s.subarray(0, take), at);
        at += n;
      }
      for (const v of [x, d]) for (let i = 0; i < v.length; i++) if (!Number.isFinite(v[i])) v[i] = 0;
    } finally {
      reader.close();
    }
    const spectrum = psd.result();
    const a = analyzeExcitation({ x, d, taps, leak: config.filter.leak, thresholdDb, maxLossDb: 0.5, frequencies: spectrum.frequencies, psd: spectrum.psd });
    try {
      mkdirSync(outDir, { recursive: true });
      writeFileSync(
        join(outDir, 'report.html'),
        renderReport({ recording, summaries: [], figures: [], gate: null, spectrum: { frequencies: Array.from(spectrum.frequencies), psd: Array.from(spectrum.psd) }, analysis: a }),
      );
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: outDir, reason: oneLine(err) });
    }
    writeJsonAtomic(join(outDir, 'analysis.json'), {
      recording,
      sampleRate: psd.sampleRate,
      config: configFile ?? DEFAULT_CONFIG_PATH,
      ...a,
      spectrum: { frequencies: Array.from(spectrum.frequencies), psd: Array.from(spectrum.psd) },
    });
    process.stdout.write(table(a, psd.sampleRate) + `\nwritten     ${outDir}/analysis.json, report.html\n`);
    return 0;
  },
};
