import { readFileSync } from 'node:fs';
import { pino, type Logger } from 'pino';
import { measurementChannels, referenceChannels, type Config } from '../config/schema.js';
import { cachedDemo } from '../demo/write.js';
import { weightLimitOf } from '../dsp/kernels.js';
import { engineSettingsOf } from '../engine/settings.js';
import { TapwardenError, oneLine } from '../errors.js';
import { WavReader } from '../io/wav/reader.js';
import { checkChannels, checkLmsStep, scanReferences, type ReferenceScan } from '../run/preflight.js';
import type { DecisionRecord, RunEvent } from '../run/record.js';
import type { RunSink } from '../run/run.js';
import { VERSION } from '../version.js';
import { buildApp } from './app.js';
import { CaptureWriter } from './captureWriter.js';
import { EngineHost } from './engineHost.js';
import { ServiceMetrics } from './metrics.js';
import { SnapshotSink, SnapshotWriter, incompatibility, readSnapshot, snapshotFileOf } from './persistence.js';
import { controlPlugin } from './plugins/control.js';
import { StatusFeed } from './plugins/feed.js';
import { metricsPlugin } from './plugins/metrics.js';
import { pagePlugin } from './plugins/page.js';
import { statusPlugin } from './plugins/status.js';
import { liveSettings, liveView } from './settings.js';
import { ServiceStatus } from './status.js';
import type { WeightsReply } from './protocol.js';
import { Telemetry } from './telemetry.js';

export const TOKEN_ENV = 'TAPWARDEN_CONTROL_TOKEN';
const MIN_TOKEN = 16;

export interface RunningService {
  readonly address: string;
  /** Resolves with why, if the engine fails: the caller stops and exits non-zero. */
  readonly failed: Promise<string>;
  /** Stops the stream, saves the weights, closes the server. */
  stop(reason: string): Promise<void>;
}

/** The control token from the environment or control.tokenFile; at least MIN_TOKEN characters either way. */
function readToken(config: Config, configFile: string): string | null {
  const fromEnv = process.env[TOKEN_ENV];
  let token: string;
  let where: string;
  if (fromEnv !== undefined && fromEnv !== '') {
    token = fromEnv.trim();
    where = TOKEN_ENV;
  } else if (config.control.tokenFile !== null) {
    const file = config.control.tokenFile;
    try {
      token = readFileSync(file, 'utf8').trim();
    } catch (err) {
      throw new TapwardenError('TW_ERR_CONFIG_READ', { file, reason: `control.tokenFile: ${oneLine(err)}` });
    }
    where = `control.tokenFile ${file}`;
  } else return null;
  if (token.length < MIN_TOKEN) {
    throw new TapwardenError('TW_ERR_CONFIG_VALUE', {
      file: configFile,
      detail: `${where} holds a token of ${token.length} characters; allowed: at least ${MIN_TOKEN} (use a long random one: openssl rand -hex 24)`,
    });
  }
  return token;
}

/** The stream's file (the cached demo when none is set) and rate, after the run layer's pre-flight checks. */
function prepareSource(
  config: Config,
  configFile: string,
  warn: (m: string) => void,
): { file: string | null; sampleRate: number; description: string; scans: ReferenceScan[] | null } {
  const { stream } = config;
  if (stream.source === 'device') {
    checkChannels(stream.device.channels, config, `stream.device (${stream.device.channels} channels)`);
    const d = stream.device;
    return { file: null, sampleRate: d.sampleRate, description: `device ${d.input === null ? '(default)' : JSON.stringify(d.input)}, ${d.channels} channel(s) at ${d.sampleRate} Hz`, scans: null };
  }
  const file = stream.file ?? cachedDemo();
  const reader = WavReader.open(file);
  try {
    checkChannels(reader.format.channels, config, file);
    for (const w of reader.warnings) warn(w);
    const rate = reader.format.sampleRate;
    // Kept for live settings: a new LMS step is checked against the same reference.
    const scans = config.filter.algorithm === 'lms' ? scanReferences(reader, referenceChannels(config), { from: 0, to: reader.frames }) : null;
    if (scans !== null) for (const w of checkLmsStep(scans, config, configFile, rate)) warn(w);
    return { file, sampleRate: rate, description: `file ${file} (${stream.pace}${stream.loop ? ', looped' : ''})`, scans };
  } finally {
    reader.close();
  }
}

/** The service log's sink: one line per decision record and per event, the record itself. */
function logSink(log: Logger): RunSink {
  return {
    onRecord: (r: DecisionRecord) => log.info({ decision: r }, 'supervisor decision'),
    onEvent: (e: RunEvent) =>
      e.type === 'rollback'
        ? log.warn({ event: e }, 'adaptive path rolled back to the clean weights')
        : e.type === 'settings'
          ? log.info({ event: e }, `settings changed: ${Object.keys(e.changes).join(', ')}`)
          : log.info({ event: e }, `clean path took weights (${e.reason})`),
  };
}

/**
 * Starts the sidecar. The composition root builds its parts in order, each from the ones before
 * it: log, source checks, telemetry, metrics, status, persistence, feed, the engine worker with
 * its sinks, then HTTP (each surface a plugin); the stream starts once the port is open.
 */
export async function startService(config: Config, configFile: string): Promise<RunningService> {
  const token = readToken(config, configFile);
  const log = pino({ level: config.log.level });
  const source = prepareSource(config, configFile, (m) => log.warn({ code: 'TW_WARN_INPUT' }, m));
  const settings = engineSettingsOf(config, source.sampleRate);
  const measured = measurementChannels(config);
  const telemetry = new Telemetry();
  const metrics = new ServiceMetrics(telemetry, measured);
  metrics.weightMeanLimit.set(config.supervisor.maxWeightMean);
  metrics.weightLimit.set(weightLimitOf(settings.filter));
  const status = new ServiceStatus(config, source.description, source.sampleRate, telemetry);
  // One snapshot per measurement channel (FILE.ch<N>.EXT with several).
  const persisted = config.persistence.file;
  const snapshots =
    persisted === null
      ? []
      : measured.map((channel) => {
          const file = snapshotFileOf(persisted, channel, measured.length > 1);
          const writer = new SnapshotWriter(file, config.persistence.minIntervalSeconds, (ok, detail) => {
            metrics.snapshots.labels(ok ? 'ok' : 'failed').inc();
            if (ok) log.info({ snapshot: file }, detail);
            else log.error({ snapshot: file }, detail);
          });
          return new SnapshotSink(writer, settings, channel);
        });
  const captures = config.capture.dir === null ? null : new CaptureWriter(config, source.sampleRate, process.env['TAPWARDEN_KERNELS'] === 'reference' ? 'reference' : 'fast');
  const feed = new StatusFeed(config.feed, metrics, () => status.feedStatus());
  let failure: (why: string) => void = () => {};
  const failed = new Promise<string>((resolve) => (failure = resolve));
  const sinks: RunSink[] = [metrics, status, feed, logSink(log), ...snapshots];
  const host = new EngineHost(config, source.file, source.sampleRate, telemetry, sinks, {
    tick: (streamSeconds) => feed.tick(streamSeconds),
    state: (up, reason) => {
      status.setStream(up, reason);
      metrics.streamUp.set(up ? 1 : 0);
      if (up) log.info({ stream: source.description }, reason);
      else log.warn({ stream: source.description }, `stream down: ${reason}`);
    },
    warning: (message) => log.warn(message),
    ended: () => log.info({ stream: source.description }, 'the stream ended; the service keeps serving its last state'),
    episode: (e) => {
      try {
        const file = captures!.write(e);
        for (const c of new Set(e.causes.map((x) => x.cause))) metrics.captures.labels(c).inc();
        const causes = e.causes.map(({ decision: _d, ...c }) => c);
        log.info({ capture: file, causes, startSeconds: e.startSample / source.sampleRate, frames: e.frames }, `episode captured (${causes.map((c) => c.cause).join(', ')})`);
        feed.broadcast({ type: 'capture', file, startSeconds: e.startSample / source.sampleRate, seconds: e.frames / source.sampleRate, causes });
      } catch (err) {
        metrics.captureFailures.inc();
        log.error({ code: 'TW_ERR_OUTPUT_WRITE' }, `episode not captured: ${oneLine(err)}`);
      }
    },
    failed: (message) => {
      status.setStream(false, `the engine failed: ${message}`);
      metrics.streamUp.set(0);
      log.error({ code: 'TW_ERR_ENGINE_FAILED' }, message);
      failure(message);
    },
  });

  const control = async (op: Parameters<EngineHost['control']>[0], channel: number | null) => {
    const r = await host.control(op, channel);
    status.applyReply(r);
    metrics.applyReply(r);
    return r;
  };
  // The settings last accepted (in effect from the window boundary after the request).
  let live = config;
  const changeSettings = async (body: unknown, why = 'request') => {
    const next = liveSettings(live, body);
    if (source.scans !== null) for (const w of checkLmsStep(source.scans, next, 'POST /api/control/settings', source.sampleRate)) log.warn({ code: 'TW_WARN_STEP' }, w);
    await host.control({ kind: 'settings', settings: engineSettingsOf(next, source.sampleRate) }, null);
    live = next;
    status.setRequestedSettings(liveView(next));
    log.info({ settings: liveView(next), why }, 'settings accepted');
    return { ok: true, appliesAt: 'the next window boundary', ...liveView(next) };
  };
  // The live settings are shared by every channel: the first restored snapshot's are taken.
  let settingsRestored = false;
  for (const sink of snapshots) {
    const file = sink.writer.file;
    const read = readSnapshot(file);
    const why = 'problem' in read ? read.problem : incompatibility(read.snapshot, settings);
    if (why !== null) log.warn({ snapshot: file }, `weights not restored: ${why}`);
    else if (!('problem' in read)) {
      status.applyReply(await host.restore(read.snapshot.weights, sink.channel));
      log.info({ snapshot: file, savedAt: read.snapshot.savedAt, channel: sink.channel }, `weights restored from ${file}`);
      if (read.snapshot.settings && !settingsRestored) {
        settingsRestored = true;
        try {
          await changeSettings(read.snapshot.settings, 'restored from the snapshot');
        } catch (err) {
          log.warn({ snapshot: file }, `settings not restored: ${oneLine(err)}`);
        }
      }
    }
  }

  const app = buildApp(log, [
    metricsPlugin(metrics),
    statusPlugin({
      status: () => status.status(),
      ready: () => (host.failure !== null ? { ready: false, reason: `the engine failed: ${host.failure}` } : { ready: status.streamUp, reason: status.streamState }),
      weights: () => host.weights(),
    }),
    controlPlugin(token, measured, control, (body) => changeSettings(body), captures !== null && config.capture.triggers.includes('mark')),
    feed.plugin,
    pagePlugin,
  ]);

  let address: string;
  try {
    address = await app.listen({ host: config.http.host, port: config.http.port });
  } catch (err) {
    // Release everything started so far, or its threads keep the process alive.
    feed.close();
    await app.close().catch(() => {});
    await host.close();
    throw new TapwardenError('TW_ERR_HTTP_LISTEN', { address: `${config.http.host}:${config.http.port}`, reason: oneLine(err) });
  }
  log.info({ address, version: VERSION, stream: source.description, taps: settings.filter.taps, sampleRate: settings.sampleRate, controlEnabled: token !== null }, 'tapwarden serving');
  host.start();

  let stopping: Promise<void> | null = null;
  return {
    address,
    failed,
    stop(reason) {
      stopping ??= (async () => {
        log.info({ reason }, 'stopping');
        let final: WeightsReply | null = null;
        try {
          final = await host.stop();
        } catch {
          // The engine is gone: the last weights it announced are saved instead.
        }
        for (const sink of snapshots) {
          const w = final?.channels.find((c) => c.channel === sink.channel);
          sink.save(w ? { weights: w.clean, version: w.cleanVersion } : null);
        }
        feed.close();
        await app.close();
        await host.close();
        log.flush?.();
      })();
      return stopping;
    },
  };
}
