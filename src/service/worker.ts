import { parentPort, workerData } from 'node:worker_threads';
import { measurementChannels } from '../config/schema.js';
import { engineSettingsOf } from '../engine/settings.js';
import { oneLine } from '../errors.js';
import { Run, type RunSink } from '../run/run.js';
import { CaptureRecorder } from './captureRecorder.js';
import { Playback } from './playback.js';
import type { FromWorker, ToWorker, WeightsReply, WorkerInit } from './protocol.js';
import { DeviceSource } from './sources/device.js';
import { FileSource } from './sources/file.js';
import type { SourceCallbacks, StreamSource } from './sources/source.js';
import { Telemetry } from './telemetry.js';

/**
 * The engine's thread: it owns the whole input path (the file pacer, or the capture child's
 * pipe), one run per measurement channel, and playback (of the first channel's clean output), so nothing the main thread does (HTTP, the feed, a flood of
 * either) can delay or drop a block. It tells the main thread about windows, handoffs and feed
 * ticks; its counters are in the shared telemetry buffer.
 */
const { config, file, sampleRate, telemetry: shared } = workerData as WorkerInit;
const port = parentPort!;
const post = (m: FromWorker): void => port.postMessage(m);
const telemetry = new Telemetry(shared);

const toMain: RunSink = {
  onRecord: (record) => post({ t: 'record', record }),
  onEvent: (event, weights) => post({ t: 'event', event, weights }),
};
const playback =
  config.stream.source === 'device' && config.stream.device.playback !== null
    ? new Playback(config, sampleRate, telemetry, (message) => post({ t: 'warning', message: `playback: ${message}` }))
    : null;
const settings = engineSettingsOf(config, sampleRate);
const recorder =
  config.capture.dir !== null && config.capture.triggers.length > 0
    ? new CaptureRecorder(config, sampleRate, (episode) => port.postMessage({ t: 'episode', episode } satisfies FromWorker, episode.channels.map((c) => c.buffer as ArrayBuffer)))
    : null;
const runs = measurementChannels(config).map(
  (channel, i) => new Run(settings, channel, [toMain, ...(playback && i === 0 ? [playback] : []), ...(recorder ? [recorder.sinkFor(channel)] : [])], config.stream.blockFrames),
);
recorder?.attach(runs);
const first = runs[0]!.engine;
const tickSamples = Math.max(1, Math.round(config.feed.intervalSeconds * sampleRate));
let nextTick = tickSamples;
/**
 * Fault injection for the service's own tests (DEVELOPERS.md): TAPWARDEN_FAULT=engine-exit:N ends
 * this thread after N blocks, as a crash of the engine would.
 */
const exitAfter = /^engine-exit:(\d+)$/.exec(process.env['TAPWARDEN_FAULT'] ?? '')?.[1];
let blocksSeen = 0;

const callbacks: SourceCallbacks = {
  block(refs, des, n) {
    if (exitAfter !== undefined && ++blocksSeen > Number(exitAfter)) process.exit(70);
    recorder?.beforeBlock(first.samples);
    const t0 = process.hrtime.bigint();
    for (let c = 0; c < runs.length; c++) runs[c]!.process(refs, des[c]!, n);
    telemetry.observeBlock(Number(process.hrtime.bigint() - t0) / 1e9);
    recorder?.afterBlock(refs, des, n);
    telemetry.add('samples', n);
    telemetry.add('blocks', 1);
    for (let c = 0; c < runs.length; c++) {
      const engine = runs[c]!.engine;
      telemetry.setChannel(c, 'adaptiveWeightSaturations', engine.adaptiveWeightSaturations);
      telemetry.setChannel(c, 'adaptiveSignalSaturations', engine.adaptiveSignalSaturations);
      telemetry.setChannel(c, 'cleanSignalSaturations', engine.cleanSignalSaturations);
      telemetry.setChannel(c, 'nonFiniteSamples', engine.nonFiniteSamples);
      telemetry.setChannel(c, 'outOfRangeSamples', engine.outOfRangeSamples);
    }
    telemetry.set('streamSeconds', first.samples / sampleRate);
    while (first.samples >= nextTick) {
      post({ t: 'tick', streamSeconds: nextTick / sampleRate });
      nextTick += tickSamples;
    }
  },
  state: (up, reason) => post({ t: 'state', up, reason }),
  ended: () => post({ t: 'ended' }),
};

const source: StreamSource = config.stream.source === 'device' ? new DeviceSource(config, telemetry, callbacks) : new FileSource(file!, config, telemetry, callbacks);

function weights(): WeightsReply {
  return {
    channels: runs.map(({ channel, engine }) => ({
      channel,
      clean: Array.from(engine.cleanWeights.weights),
      adaptive: Array.from(engine.adaptiveWeights()),
      cleanVersion: engine.cleanWeights.version,
      adapting: engine.adapting,
      handoffsHeld: engine.handoffsHeld,
    })),
  };
}

/** The runs a request is for: one channel's (the main thread checked it exists), or every one. */
const runsFor = (channel: number | null) => (channel === null ? runs : runs.filter((r) => r.channel === channel));

port.on('message', (m: ToWorker) => {
  try {
    switch (m.t) {
      case 'start':
        source.start();
        return;
      case 'control': {
        const op = m.op;
        if (op.kind === 'mark') {
          recorder?.mark(op.note, m.channel);
          break;
        }
        for (const { engine } of runsFor(m.channel)) {
          if (op.kind === 'handoff') engine.handoff('forced');
          else if (op.kind === 'adaptation') engine.adapting = !op.frozen;
          else if (op.kind === 'handoffs') engine.handoffsHeld = op.frozen;
          else if (op.kind === 'rollback') engine.rollback('forced');
          else if (op.kind === 'settings') engine.changeSettings(op.settings);
          else engine.reset();
        }
        break;
      }
      case 'restore':
        for (const { engine } of runsFor(m.channel)) engine.restore(m.weights);
        break;
      case 'stop':
        source.stop();
        playback?.stop();
        break;
      case 'weights':
        break;
    }
    post({ t: 'reply', id: m.id, weights: weights() });
  } catch (err) {
    post({ t: 'failed', id: 'id' in m ? m.id : null, message: oneLine(err) });
  }
});
