import { basename, extname, join } from 'node:path';
import { writeFileSync } from 'node:fs';
import { DEFAULT_CONFIG_PATH, loadConfig, overlayConfig } from '../../config/load.js';
import { readCaptureFor, sideFileOf } from '../../run/capture.js';
import { measurementChannels } from '../../config/schema.js';
import { TapwardenError, oneLine, warningLine } from '../../errors.js';
import type { Policy } from '../../replay/replay.js';
import type { Judgement } from '../../run/summary.js';
import type { Command } from '../command.js';
import { seconds } from '../options.js';
import { progressBar } from '../progress.js';

function policyName(file: string, taken: Set<string>): string {
  const base = basename(file, extname(file));
  let name = base;
  for (let i = 2; taken.has(name); i++) name = `${base}-${i}`;
  taken.add(name);
  return name;
}

export const replayCommand: Command = {
  summary: 'run a recording through the engine (one or several policies) and report',
  usage: `Usage: tapwarden replay [REC.wav] [--config FILE] [--policy P.yaml ...] [--gate BASELINE]
                        [--from SECONDS] [--to SECONDS] [--truth SIGNAL.wav] [--out DIR]

Runs the dual-path engine over a recording as fast as the CPU allows and writes
DIR/summary.json, DIR/decisions.ndjson (every window's decision record), DIR/clean.wav (the
output path), DIR/adaptive.wav (the adapting path) and DIR/report.html. With no REC, replays
the demo bench recording (written to DIR first).

With --policy (repeatable), every policy runs over one decode of the recording: DIR/<policy>/
holds each one's files, DIR/comparison.json and DIR/report.html compare them, and a table is
printed. A policy file overlays the --config file (or the embedded default). Every policy's
clean path is judged against one threshold: the gate baseline's supervisor.minCancellationDb,
else the --config file's, else the default's.

Options:
  --config FILE      YAML overriding config/default.yaml (keys in README.md)
  --policy FILE      a candidate policy; give it several times to compare
  --gate BASELINE    exit 8 when a policy is worse than BASELINE (one of the --policy files or its name)
  --from SECONDS     start this far into the recording (default 0)
  --to SECONDS       stop here (default: the end)
  --truth FILE       the wanted signal alone (the demo writes one): per octave band, how much of it
                     survived in the clean output (signal-to-distortion ratio)
  --out DIR          output directory (default: tapwarden-out)
  -h, --help         this help`,
  options: {
    config: { type: 'string' },
    policy: { type: 'string', multiple: true },
    gate: { type: 'string' },
    from: { type: 'string' },
    to: { type: 'string' },
    truth: { type: 'string' },
    out: { type: 'string', default: 'tapwarden-out' },
  },
  positionals: [0, 1],
  async run(values, positionals) {
    const outDir = values['out'] as string;
    const configFile = values['config'] as string | undefined;
    const policyFiles = (values['policy'] as string[] | undefined) ?? [];
    const gateArg = values['gate'] as string | undefined;
    if (gateArg !== undefined && policyFiles.length === 0) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: 'replay: --gate needs the policies to compare; allowed: --gate BASELINE with two or more --policy FILE' });
    }
    const range = { fromSeconds: seconds('replay', 'from', values['from']), toSeconds: seconds('replay', 'to', values['to']) };
    // A captured episode (a side file beside the recording) carries its config and run states.
    const capture = positionals[0] === undefined ? null : readCaptureFor(positionals[0]);
    if (capture !== null) {
      const bad = configFile !== undefined ? '--config' : values['from'] !== undefined || values['to'] !== undefined ? '--from/--to' : null;
      if (bad !== null) {
        throw new TapwardenError('TW_ERR_USAGE', {
          detail: `replay: ${bad} is not allowed with a capture (${sideFileOf(positionals[0]!)} carries its config and where its runs were); allowed: --policy FILE to overlay it`,
        });
      }
    }
    const taken = new Set<string>();
    const policies: Policy[] =
      capture !== null
        ? policyFiles.length === 0
          ? [{ name: 'capture', config: overlayConfig(capture.config, []), configFile: sideFileOf(positionals[0]!) }]
          : policyFiles.map((f) => ({ name: policyName(f, taken), config: overlayConfig(capture.config, [f]), configFile: f }))
        : policyFiles.length === 0
          ? [{ name: configFile ? policyName(configFile, taken) : 'default', config: loadConfig(configFile), configFile: configFile ?? DEFAULT_CONFIG_PATH }]
          : policyFiles.map((f) => ({
              name: policyName(f, taken),
              config: loadConfig(configFile === undefined ? [f] : [configFile, f]),
              configFile: f,
            }));
    const baseline = gateArg === undefined ? null : (policies.find((p) => p.name === gateArg || p.configFile === gateArg) ?? null);
    if (gateArg !== undefined && baseline === null) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `replay: --gate ${gateArg} is not one of the policies; allowed: ${policies.map((p) => p.name).join(', ')}` });
    }
    const judge: Judgement =
      baseline !== null
        ? { minCancellationDb: baseline.config.supervisor.minCancellationDb, source: `gate baseline ${baseline.name}` }
        : policies.length === 1
          ? { minCancellationDb: policies[0]!.config.supervisor.minCancellationDb, source: policies[0]!.name }
          : capture !== null
            ? { minCancellationDb: capture.config.supervisor.minCancellationDb, source: 'the capture' }
            : { minCancellationDb: loadConfig(configFile).supervisor.minCancellationDb, source: configFile ?? 'the embedded default' };
    // The engine, the report and the rest load only once the command line and configs are good.
    const [{ DEMO_RECORDING, writeDemo }, { renderReport }, { figuresOf, formatComparison, labelsOf, worseThan, worstIndex }, { replay, writeJsonAtomic }, { describeDrift, formatSummary }] = await Promise.all([
      import('../../demo/write.js'),
      import('../../report/html.js'),
      import('../../replay/compare.js'),
      import('../../replay/replay.js'),
      import('../../replay/summary.js'),
    ]);
    let recording = positionals[0];
    if (recording === undefined) {
      writeDemo(outDir);
      recording = join(outDir, DEMO_RECORDING);
    }
    const bar = progressBar('replay');
    let result;
    try {
      const truth = values['truth'] as string | undefined;
      result = replay({
        recording,
        policies,
        outDir,
        judge,
        range,
        ...(truth === undefined ? {} : { truth }),
        ...(capture === null ? {} : { resume: { file: sideFileOf(recording), capture } }),
        onProgress: (done, total) => bar.update(done, total),
      });
    } finally {
      bar.stop();
    }
    const summaries = result.summaries;
    const labels = labelsOf(summaries);
    const figures = summaries.map((s, i) => figuresOf(s, labels[i]));
    const worse = new Map<string, string[]>();
    if (baseline) {
      // Each channel is held to the baseline's same channel.
      summaries.forEach((s, i) => {
        if (s.policy === baseline.name) return;
        const b = summaries.findIndex((x) => x.policy === baseline.name && x.channel === s.channel);
        worse.set(figures[i]!.name, worseThan(figures[i]!, figures[b]!, baseline.config.supervisor.windowSeconds));
      });
    }
    // With several measurement channels: per policy, the channel with the worst figures.
    const multi = measurementChannels(policies[0]!.config).length > 1;
    const worstChannels = multi
      ? Object.fromEntries(
          [...new Set(summaries.map((s) => s.policy))].map((p) => {
            const own = summaries.flatMap((s, i) => (s.policy === p ? [i] : []));
            const w = own[worstIndex(own.map((i) => figures[i]!))]!;
            return [p, { channel: summaries[w]!.channel, verdict: figures[w]!.verdict, healthyShare: figures[w]!.healthyShare }];
          }),
        )
      : null;
    const worstLines = worstChannels
      ? Object.entries(worstChannels).map(([p, w]) => `worst       ${policies.length > 1 ? `${p}: ` : ''}channel ${w.channel} (${w.verdict}, healthy ${(100 * w.healthyShare).toFixed(1)} %)\n`)
      : [];
    const gate = baseline ? { baseline: baseline.name, worse: Object.fromEntries(worse) } : null;
    const report = renderReport({
      recording,
      durationSeconds: summaries[0]!.durationSeconds,
      sampleRate: result.sampleRate,
      summaries,
      figures,
      gate,
      spectrum: result.spectrum,
      analysis: null,
    });
    try {
      writeFileSync(join(outDir, 'report.html'), report);
    } catch (err) {
      throw new TapwardenError('TW_ERR_OUTPUT_WRITE', { file: join(outDir, 'report.html'), reason: oneLine(err) });
    }
    const said = new Set<string>();
    for (const w of summaries.flatMap((s) => s.warnings)) {
      const line = warningLine(w.code, w.message);
      if (!said.has(line)) process.stderr.write(line + '\n');
      said.add(line);
    }
    if (policies.length === 1) {
      summaries.forEach((s, i) => {
        if (multi) process.stdout.write(`${i > 0 ? '\n' : ''}channel     ${s.channel}\n`);
        process.stdout.write(formatSummary(s, result.dirs[i]!, !multi) + '\n');
      });
      if (multi) process.stdout.write(`report      ${outDir}/report.html\n`);
      for (const line of worstLines) process.stdout.write(line);
    } else {
      writeJsonAtomic(join(outDir, 'comparison.json'), { recording, reads: result.reads, judgement: judge, policies: figures, gate, worstChannels });
      process.stdout.write(formatComparison(figures, baseline ? { baseline: baseline.name, worse } : null) + '\n');
      summaries.forEach((s, i) => process.stdout.write(`${labels[i]}: ${describeDrift(s)}\n`));
      for (const line of worstLines) process.stdout.write(line);
      process.stdout.write(`written     ${outDir}/comparison.json, report.html, and per policy${multi ? ' and channel (POLICY/chN/)' : ''}: summary.json, decisions.ndjson, clean.wav, adaptive.wav\n`);
    }
    const failing = [...worse].filter(([, r]) => r.length > 0);
    if (failing.length > 0) {
      throw new TapwardenError('TW_ERR_GATE', {
        detail: `gate: ${failing.map(([n, r]) => `${n} is worse than ${baseline!.name} (${r.join('; ')})`).join('; ')}`,
      });
    }
    return 0;
  },
};
