import { parentPort, workerData } from 'node:worker_threads';
import { engineSettingsOf } from '../engine/settings.js';
import { oneLine } from '../errors.js';
import { Run, type RunSink } from '../run/run.js';
import { Playback } from './playback.js';
import type { FromWorker, ToWorker, WeightsReply, WorkerInit } from './protocol.js';
import { DeviceSource } from './sources/device.js';
import { FileSource } from './sources/file.js';
import type { SourceCallbacks, StreamSource } from './sources/source.js';
import { Telemetry } from './telemetry.js';

/**
 * The engine's thread: it owns the whole input path (the file pacer, or the capture child's
 * pipe), the run, and playback, so nothing the main thread does (HTTP, the feed, a flood of
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
const run = new Run(engineSettingsOf(config, sampleRate), config.input.desiredChannel, playback ? [toMain, playback] : [toMain], config.stream.blockFrames);
const engine = run.engine;
const tickSamples = Math.max(1, Math.round(config.feed.intervalSeconds * sampleRate));
let nextTick = tickSamples;
/**
 * Fault injection for the service's own tests (DEVELOPERS.md): TAPWARDEN_FAULT=engine-exit:N ends
 * this thread after N blocks, as a crash of the engine would.
 */
const exitAfter = /^engine-exit:(\d+)$/.exec(process.env['TAPWARDEN_FAULT'] ?? '')?.[1];
let blocksSeen = 0;

const callbacks: SourceCallbacks = {
  block(ref, des, n) {
    if (exitAfter !== undefined && ++blocksSeen > Number(exitAfter)) process.exit(70);
    const t0 = process.hrtime.bigint();
    run.process(ref, des, n);
    telemetry.observeBlock(Number(process.hrtime.bigint() - t0) / 1e9);
    telemetry.add('samples', n);
    telemetry.add('blocks', 1);
    telemetry.set('adaptiveWeightSaturations', engine.adaptiveWeightSaturations);
    telemetry.set('adaptiveSignalSaturations', engine.adaptiveSignalSaturations);
    telemetry.set('cleanSignalSaturations', engine.cleanSignalSaturations);
    telemetry.set('nonFiniteSamples', engine.nonFiniteSamples);
    telemetry.set('outOfRangeSamples', engine.outOfRangeSamples);
    telemetry.set('streamSeconds', engine.samples / sampleRate);
    while (engine.samples >= nextTick) {
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
    clean: Array.from(engine.cleanWeights.weights),
    adaptive: Array.from(engine.adaptiveWeights()),
    cleanVersion: engine.cleanWeights.version,
    adapting: engine.adapting,
    handoffsHeld: engine.handoffsHeld,
  };
}

port.on('message', (m: ToWorker) => {
  try {
    switch (m.t) {
      case 'start':
        source.start();
        return;
      case 'control': {
        const op = m.op;
        if (op.kind === 'handoff') engine.handoff('forced');
        else if (op.kind === 'adaptation') engine.adapting = !op.frozen;
        else if (op.kind === 'handoffs') engine.handoffsHeld = op.frozen;
        else if (op.kind === 'rollback') engine.rollback('forced');
        else if (op.kind === 'settings') engine.changeSettings(op.settings);
        else engine.reset();
        break;
      }
      case 'restore':
        engine.restore(m.weights);
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
