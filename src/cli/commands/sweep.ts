import { availableParallelism } from 'node:os';
import { join } from 'node:path';
import { DEFAULT_CONFIG_PATH, loadConfig } from '../../config/load.js';
import { TapwardenError, quote } from '../../errors.js';
import type { Command } from '../command.js';
import { progressBar } from '../progress.js';

export const sweepCommand: Command = {
  summary: 'run every combination of varied settings on every recording and pick the best',
  usage: `Usage: tapwarden sweep REC.wav [REC.wav ...] [--config BASE.yaml] --vary KEY=V1,V2,... [--vary KEY=A:B:STEP ...]
                       [--gate BASELINE.yaml] [--jobs N] [--queue redis://HOST:PORT] [--yes] [--out DIR]

Every combination of the --vary values (keys under filter. or supervisor.) overlays the base
config and runs on every recording; every cell is judged at the base config's
supervisor.minCancellationDb. Writes DIR/sweep.json (every cell and, per combination, the worst
case and the median over the recordings), DIR/report.html and DIR/cells/ (each cell's figures;
a second run with the same recordings, configs and tapwarden version reuses them, so an
interrupted sweep resumes).

Options:
  --config FILE      the base config (YAML over config/default.yaml)
  --vary KEY=VALUES  values to try: a comma list (YAML scalars) or a range A:B:STEP; repeat per key
  --gate FILE        also run this baseline policy; combinations worse than it are not picked, and
                     the sweep exits 8 when every combination is worse
  --jobs N           threads of the local pool (default: every core, ${availableParallelism()} here)
  --queue URL        put the cells on a BullMQ queue on Redis instead; run 'tapwarden worker --queue URL'
  --yes              allow more than 2000 cells
  --out DIR          output directory (default: tapwarden-sweep)
  -h, --help         this help`,
  options: {
    config: { type: 'string' },
    vary: { type: 'string', multiple: true },
    gate: { type: 'string' },
    jobs: { type: 'string' },
    queue: { type: 'string' },
    yes: { type: 'boolean', default: false },
    out: { type: 'string', default: 'tapwarden-sweep' },
  },
  positionals: [1, Infinity],
  async run(values, positionals) {
    const { parseAxis, combinations } = await import('../../sweep/grid.js');
    const baseFile = (values['config'] as string | undefined) ?? DEFAULT_CONFIG_PATH;
    const base = loadConfig(values['config'] as string | undefined);
    const axes = ((values['vary'] as string[] | undefined) ?? []).map(parseAxis);
    combinations(base, axes, baseFile); // every combination validated before anything runs
    const jobsArg = values['jobs'] as string | undefined;
    const jobs = jobsArg === undefined ? availableParallelism() : Number(jobsArg);
    if (!Number.isInteger(jobs) || jobs < 1 || jobs > 256) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `sweep: --jobs ${quote(jobsArg)} is not allowed; allowed: an integer from 1 to 256` });
    }
    const gateFile = values['gate'] as string | undefined;
    const gate = gateFile === undefined ? null : { file: gateFile, config: loadConfig(values['config'] === undefined ? [gateFile] : [values['config'] as string, gateFile]) };
    const queue = (values['queue'] as string | undefined) ?? null;
    if (queue !== null) (await import('../../sweep/queue.js')).connectionOf(queue);
    const outDir = values['out'] as string;
    const [{ sweep, writeSweepJson, writeText }, { renderSweepReport }] = await Promise.all([import('../../sweep/sweep.js'), import('../../report/sweepHtml.js')]);
    const bar = progressBar('sweep', 'cells');
    const opts = {
      recordings: positionals,
      base,
      baseFile,
      axes,
      gate,
      jobs,
      queue,
      outDir,
      yes: values['yes'] === true,
      onProgress: (done: number, total: number) => bar.update(done, total),
      onQueued: (n: number) => process.stderr.write(`sweep: ${n} batches queued on ${queue}; waiting for 'tapwarden worker --queue ${queue}' to take them\n`),
    };
    let r;
    try {
      r = await sweep(opts);
    } finally {
      bar.stop();
    }
    writeSweepJson(join(outDir, 'sweep.json'), opts, r);
    writeText(
      join(outDir, 'report.html'),
      renderSweepReport({ base: baseFile, recordings: positionals, axes, combinations: r.combinations, best: r.best, cells: r.cells, judgedAtDb: base.supervisor.minCancellationDb }),
    );
    if (r.best !== null) {
      // The pick as a policy file over the base config, for replay --policy and freeze --policy.
      const nested: Record<string, Record<string, unknown>> = {};
      for (const [k, v] of Object.entries(r.best.parameters)) {
        const [section, key] = k.split('.') as [string, string];
        (nested[section] ??= {})[key] = v;
      }
      const { stringify } = await import('yaml');
      writeText(join(outDir, 'best.yaml'), `# The sweep's pick over ${baseFile} (tapwarden sweep, README "sweep").\n${stringify(nested)}`);
    }
    const failed = r.cells.filter((c) => c.error !== null);
    const label = (p: Record<string, unknown>) =>
      Object.entries(p)
        .map(([k, v]) => `${k}=${JSON.stringify(v)}`)
        .join(' ');
    const b = r.best;
    process.stdout.write(
      `sweep       ${r.combinations.length} combinations x ${positionals.length} recordings: ${r.ran} cells run, ${r.cached} reused${failed.length ? `, ${failed.length} failed` : ''}\n` +
        (b === null
          ? 'best        none (every combination failed' + (gate ? ' or is worse than the baseline)' : ')') + '\n'
          : `best        ${label(b.parameters)}: worst-case median ${b.worst.cleanCancellationMedianDb?.toFixed(1) ?? 'n/a'} dB, p5 ${b.worst.cleanCancellationP5Db?.toFixed(1) ?? 'n/a'} dB, healthy ${((b.worst.healthyShare ?? 0) * 100).toFixed(1)} %, ${b.verdict}\n`) +
        failed
          .slice(0, 5)
          .map((c) => `failed      ${c.recording} ${label(c.parameters)}: ${c.error!.message} [${c.error!.code}]\n`)
          .join('') +
        `written     ${join(outDir, 'sweep.json')}, ${join(outDir, 'report.html')}${b === null ? '' : `, ${join(outDir, 'best.yaml')} (the pick as a policy)`}\n`,
    );
    if (gate !== null && b === null) {
      throw new TapwardenError('TW_ERR_GATE', { detail: `gate: every combination is worse than ${gateFile} or failed (sweep.json has the reasons)` });
    }
    return 0;
  },
};
