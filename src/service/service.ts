import { readFileSync } from 'node:fs';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { DriftForecaster, trendPoints, type DriftForecast } from '../analysis/forecast.js';
import type { Config } from '../config/schema.js';
import { DEMO_RECORDING, writeDemo } from '../demo/write.js';
import { weightLimitOf } from '../dsp/kernels.js';
import type { WindowReport } from '../engine/dualPath.js';
import { engineSettingsOf } from '../engine/settings.js';
import { TapwardenError, oneLine } from '../errors.js';
import { checkChannels, checkLmsStep } from '../replay/run.js';
import { WavReader } from '../io/wav/reader.js';
import { VERSION } from '../version.js';
import { EngineHost } from './engineHost.js';
import { StatusFeed } from './feed.js';
import { buildApp } from './http.js';
import { ServiceMetrics } from './metrics.js';
import { incompatibility, makeSnapshot, readSnapshot, SnapshotWriter } from './persistence.js';
import { Playback } from './playback.js';
import { DeviceSource } from './sources/device.js';
import { FileSource } from './sources/file.js';
import type { StreamSource } from './sources/source.js';

export const TOKEN_ENV = 'TAPWARDEN_CONTROL_TOKEN';
const RECENT_DECISIONS = 20;

export interface RunningService {
  readonly address: string;
  /** Stops the stream, saves the weights, closes the server. */
  stop(reason: string): Promise<void>;
}

function readToken(config: Config): string | null {
  const fromEnv = process.env[TOKEN_ENV];
  if (fromEnv) return fromEnv.trim();
  const file = config.control.tokenFile;
  if (file === null) return null;
  let token: string;
  try {
    token = readFileSync(file, 'utf8').trim();
  } catch (err) {
    throw new TapwardenError('TW_ERR_CONFIG_READ', { file, reason: `control.tokenFile: ${oneLine(err)}` });
  }
  if (token.length < 16) {
    throw new TapwardenError('TW_ERR_CONFIG_VALUE', { file, detail: 'control.tokenFile holds a token shorter than 16 characters; use a long random one' });
  }
  return token;
}

function openSource(config: Config, configFile: string): StreamSource {
  if (config.stream.source === 'device') {
    const { channels } = config.stream.device;
    for (const key of ['referenceChannel', 'desiredChannel'] as const) {
      if (config.input[key] >= channels) {
        throw new TapwardenError('TW_ERR_CONFIG_VALUE', {
          file: configFile,
          detail: `input.${key} = ${config.input[key]} is not allowed; allowed: 0..${channels - 1} (stream.device.channels = ${channels})`,
        });
      }
    }
    return new DeviceSource(config);
  }
  let file = config.stream.file;
  if (file === null) {
    const dir = mkdtempSync(join(tmpdir(), 'tapwarden-serve-'));
    writeDemo(dir);
    file = join(dir, DEMO_RECORDING);
  }
  const probe = WavReader.open(file);
  try {
    checkChannels(probe, config, file);
  } finally {
    probe.close();
  }
  checkLmsStep(file, config, configFile);
  return new FileSource(file, config);
}

/** Starts the sidecar: the stream, the engine worker, HTTP, the feed and persistence. */
export async function startService(config: Config, configFile: string): Promise<RunningService> {
  const token = readToken(config);
  const source = openSource(config, configFile);
  const settings = engineSettingsOf(config, source.sampleRate);
  const playbackOn = config.stream.source === 'device' && config.stream.device.playback !== null;
  const host = new EngineHost(settings, config.stream.queueBlocks, playbackOn);
  const metrics = new ServiceMetrics();
  metrics.weightMeanLimit.set(config.supervisor.maxWeightMean);
  metrics.weightLimit.set(weightLimitOf(settings.filter));
  const recent: object[] = [];
  let last: WindowReport | null = null;
  let streamState = 'starting';
  let workerFailed: string | null = null;
  let flags = { adapting: true, handoffsHeld: false, cleanVersion: 0 };
  let lastHandoff: { at: string; version: number; reason: string } | null = null;
  let forecast: DriftForecast | null = null;
  const startedAt = Date.now();

  const status = () => ({
    version: VERSION,
    uptimeSeconds: (Date.now() - startedAt) / 1000,
    stream: { source: config.stream.source, description: source.description, up: source.up, state: streamState, sampleRate: source.sampleRate },
    filter: config.filter,
    supervisor: config.supervisor,
    engine: {
      samples: host.samples,
      blocks: host.blocks,
      ...flags,
      saturations: host.saturations,
      nonFiniteSamples: host.nonFiniteSamples,
      queue: { depth: host.inFlight, capacity: host.capacity, overruns: host.overruns, underruns: playback?.underruns ?? 0 },
    },
    lastWindow: last,
    lastHandoff,
    forecast,
    recentDecisions: recent,
  });

  const app = buildApp({
    logLevel: config.log.level,
    token,
    metricsText: () => metrics.registry.metrics(),
    metricsContentType: metrics.registry.contentType,
    status,
    ready: () =>
      workerFailed !== null
        ? { ready: false, reason: `the engine failed: ${workerFailed}` }
        : source.up
          ? { ready: true, reason: '' }
          : { ready: false, reason: streamState },
    weights: () => host.weights(),
    control: async (op) => {
      const r = await host.control(op);
      flags = { adapting: r.adapting, handoffsHeld: r.handoffsHeld, cleanVersion: r.cleanVersion };
      metrics.adapting.set(r.adapting ? 1 : 0);
      metrics.handoffsEnabled.set(r.handoffsHeld ? 0 : 1);
      return r;
    },
  });
  const log = app.log;
  const playback = playbackOn ? new Playback(config, source.sampleRate, metrics, (m) => log.warn({ playback: m }, 'playback problem')) : null;

  const writer =
    config.persistence.file === null
      ? null
      : new SnapshotWriter(config.persistence.file, config.persistence.minIntervalSeconds, (ok, detail) => {
          metrics.snapshots.labels(ok ? 'ok' : 'failed').inc();
          if (ok) log.info({ snapshot: config.persistence.file }, detail);
          else log.error({ snapshot: config.persistence.file }, detail);
        });
  if (writer !== null) {
    const read = readSnapshot(writer.file);
    if ('problem' in read) {
      log.warn({ snapshot: writer.file }, `weights not restored: ${read.problem}`);
    } else {
      const why = incompatibility(read.snapshot, settings);
      if (why !== null) log.warn({ snapshot: writer.file }, `weights not restored: ${why}`);
      else {
        const r = await host.restore(read.snapshot.weights);
        flags = { ...flags, cleanVersion: r.cleanVersion };
        log.info({ snapshot: writer.file, savedAt: read.snapshot.savedAt }, `weights restored from ${writer.file}`);
      }
    }
  }

  host.on('processed', (n, seconds) => {
    metrics.samples.inc(n);
    metrics.blocks.inc();
    metrics.blockSeconds.observe(seconds);
    metrics.queueDepth.set(host.inFlight);
    metrics.setTotals({ ...host.saturations, nonFinite: host.nonFiniteSamples, overruns: host.overruns });
  });
  const forecaster = new DriftForecaster(trendPoints(config.supervisor.windowSeconds));
  host.on('window', (r) => {
    last = r;
    metrics.onWindow(r);
    forecaster.push(r.timeSeconds, r.adaptive.weightMean, r.adaptive.minWeight, r.adaptive.maxWeight);
    forecast = forecaster.forecast(weightLimitOf(settings.filter), config.supervisor.maxWeightMean);
    metrics.onForecast(forecast);
    const d = r.decision;
    const decision = {
      type: 'decision',
      timeSeconds: r.timeSeconds,
      sample: r.endSample,
      outcome: d.outcome,
      failed: d.failed,
      rollback: d.rollback,
      adaptive: r.adaptive,
      clean: r.clean,
    };
    recent.unshift(decision);
    recent.length = Math.min(recent.length, RECENT_DECISIONS);
    feed.broadcast(decision);
    log.info({ decision: { outcome: d.outcome, failed: d.failed, timeSeconds: r.timeSeconds, adaptiveCancellationDb: r.adaptive.cancellationDb, cleanCancellationDb: r.clean.cancellationDb, weightMean: r.adaptive.weightMean } }, 'supervisor decision');
  });
  host.on('handoff', (h) => {
    metrics.onHandoff(h.reason, h.version);
    flags = { ...flags, cleanVersion: h.version };
    lastHandoff = { at: new Date().toISOString(), version: h.version, reason: h.reason };
    feed.broadcast({ type: 'handoff', version: h.version, reason: h.reason, sample: h.sample });
    writer?.offer(makeSnapshot(settings, h.weights, h.version));
  });
  host.on('rollback', (sample, reason) => {
    metrics.rollbacks.labels(reason).inc();
    log.warn({ sample, reason }, 'adaptive path rolled back to the clean weights');
  });
  host.on('output', (block) => playback?.play(block));
  host.on('failed', (message) => {
    workerFailed = message;
    metrics.streamUp.set(0);
    log.error({ engine: message }, 'the engine worker failed');
  });
  source.on('state', (up, reason) => {
    streamState = reason;
    metrics.streamUp.set(up ? 1 : 0);
    if (up) log.info({ stream: source.description }, reason);
    else log.warn({ stream: source.description }, `stream down: ${reason}`);
  });

  const feed = new StatusFeed(app.server, config.feed, metrics, () => {
    const s = status();
    return { time: new Date().toISOString(), stream: s.stream, engine: s.engine, lastWindow: s.lastWindow, lastHandoff: s.lastHandoff, forecast: s.forecast };
  });

  let address: string;
  try {
    address = await app.listen({ host: config.http.host, port: config.http.port });
  } catch (err) {
    // Release everything started so far, or its timers and threads keep the process alive.
    feed.close();
    playback?.stop();
    await app.close().catch(() => {});
    await host.close();
    source.stop();
    throw new TapwardenError('TW_ERR_HTTP_LISTEN', { address: `${config.http.host}:${config.http.port}`, reason: oneLine(err) });
  }
  log.info({ address, version: VERSION, stream: source.description, taps: settings.filter.taps, sampleRate: settings.sampleRate, controlEnabled: token !== null }, 'tapwarden serving');
  source.start(host);

  let stopping: Promise<void> | null = null;
  return {
    address,
    stop(reason) {
      stopping ??= (async () => {
        log.info({ reason }, 'stopping');
        source.stop();
        playback?.stop();
        if (writer !== null) {
          const w = await host.weights();
          writer.offer(makeSnapshot(settings, w.clean, w.cleanVersion));
          writer.flush();
        }
        feed.close();
        await app.close();
        await host.close();
      })();
      return stopping;
    },
  };
}
