import { parentPort, workerData } from 'node:worker_threads';
import { measurementChannels, referenceChannels } from '../config/schema.js';
import { engineSettingsOf } from '../engine/settings.js';
import { oneLine } from '../errors.js';
import { Run, type RunSink } from '../run/run.js';
import { BlockRing } from './blockRing.js';
import { CaptureRecorder } from './captureRecorder.js';
import { Playback } from './playback.js';
import type { FromWorker, ToWorker, WeightsReply, WorkerInit } from './protocol.js';
import { DeviceSource } from './sources/device.js';
import { FileSource } from './sources/file.js';
import type { SourceCallbacks, StreamSource } from './sources/source.js';
import { Telemetry } from './telemetry.js';

/**
 * An engine thread, for one group of measurement channels (stream.workers; channelGroups): one
 * run per channel of its group. The first group's thread is the input thread: it owns the whole
 * input path (the file pacer, or the capture child's pipe), playback (of the first channel's
 * clean output) and the feed ticks, and hands every block to the other groups' threads through
 * their bounded queues (blockRing.ts), so nothing the main thread does (HTTP, the feed, a flood
 * of either) can delay or drop a block, and a slow group drops only its own. Each thread tells
 * the main thread about its windows and handoffs; the counters are in the shared telemetry buffer.
 */
const { config, file, sampleRate, telemetry: shared, group, input, rings: ringInits } = workerData as WorkerInit;
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
const measured = measurementChannels(config);
const K = referenceChannels(config).length;
const rings = ringInits.map((r) => new BlockRing(r.buffer, r.slots, r.columns, r.frames));
const recorder =
  config.capture.dir !== null && config.capture.triggers.length > 0
    ? new CaptureRecorder(config, sampleRate, (episode) => port.postMessage({ t: 'episode', episode } satisfies FromWorker, episode.channels.map((c) => c.buffer as ArrayBuffer)))
    : null;
const runs = group.map(
  (index) => new Run(settings, measured[index]!, [toMain, ...(playback && index === 0 ? [playback] : []), ...(recorder ? [recorder.sinkFor(measured[index]!)] : [])], config.stream.blockFrames),
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
/** TAPWARDEN_FAULT=group-stall:MS: another group's thread stalls MS ms at its first block, as an overloaded core would. */
let groupStallMs = input ? 0 : Number(/^group-stall:(\d+)$/.exec(process.env['TAPWARDEN_FAULT'] ?? '')?.[1] ?? 0);
let blocksSeen = 0;

/** One block through this thread's runs: refs (K) and this group's measurement channels. */
function processBlock(refs: readonly Float64Array[], des: readonly Float64Array[], n: number): number {
  recorder?.beforeBlock(first.samples);
  const t0 = process.hrtime.bigint();
  for (let c = 0; c < runs.length; c++) runs[c]!.process(refs, des[c]!, n);
  const seconds = Number(process.hrtime.bigint() - t0) / 1e9;
  recorder?.afterBlock(refs, des, n);
  for (let c = 0; c < runs.length; c++) {
    const engine = runs[c]!.engine;
    const i = group[c]!;
    telemetry.setChannel(i, 'samples', engine.samples);
    telemetry.setChannel(i, 'adaptiveWeightSaturations', engine.adaptiveWeightSaturations);
    telemetry.setChannel(i, 'adaptiveSignalSaturations', engine.adaptiveSignalSaturations);
    telemetry.setChannel(i, 'cleanSignalSaturations', engine.cleanSignalSaturations);
    telemetry.setChannel(i, 'nonFiniteSamples', engine.nonFiniteSamples);
    telemetry.setChannel(i, 'outOfRangeSamples', engine.outOfRangeSamples);
  }
  return seconds;
}

/** The input thread's view of the measurement channels: its own group's, and each other group's block to queue. */
const ownDes: Float64Array[] = [];
const queued = rings.map(() => [] as Float64Array[]);
let dropped = 0;
/** A file streamed as fast as the engines go: the input waits for a busy group instead of dropping. */
const freeRunning = config.stream.source === 'file' && config.stream.pace === 'free';

const callbacks: SourceCallbacks = {
  block(refs, des, n) {
    if (exitAfter !== undefined && ++blocksSeen > Number(exitAfter)) process.exit(70);
    // The other groups' blocks first: they work while this thread works on its own.
    for (let g = 0; g < rings.length; g++) {
      const cols = queued[g]!;
      cols.length = 0;
      for (let k = 0; k < K; k++) cols.push(refs[k]!);
      for (const i of ringInits[g]!.group) cols.push(des[i]!);
      if (!rings[g]!.push(cols, n, freeRunning)) dropped++;
    }
    ownDes.length = 0;
    for (const i of group) ownDes.push(des[i]!);
    telemetry.observeBlock(processBlock(refs, ownDes, n));
    telemetry.add('samples', n);
    telemetry.add('blocks', 1);
    if (dropped > 0) {
      // A group that fell further behind than its queue holds lost this many blocks.
      telemetry.add('overruns', dropped);
      dropped = 0;
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

const source: StreamSource | null = !input
  ? null
  : config.stream.source === 'device'
    ? new DeviceSource(config, telemetry, callbacks)
    : new FileSource(file!, config, telemetry, callbacks);

/** Another group's thread: blocks from its queue, as they come, until stopped. */
let consuming = !input;
async function consume(): Promise<void> {
  const ring = rings[0]!;
  const refs: Float64Array[] = [];
  const des: Float64Array[] = [];
  while (consuming) {
    await ring.written();
    ring.drain((cols, n) => {
      if (groupStallMs > 0) {
        const until = performance.now() + groupStallMs;
        groupStallMs = 0;
        while (performance.now() < until);
      }
      refs.length = 0;
      des.length = 0;
      for (let c = 0; c < cols.length; c++) (c < K ? refs : des).push(cols[c]!);
      processBlock(refs, des, n);
    });
  }
}

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
        if (source !== null) source.start();
        else void consume();
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
        source?.stop();
        playback?.stop();
        consuming = false;
        break;
      case 'weights':
        break;
    }
    post({ t: 'reply', id: m.id, weights: weights() });
  } catch (err) {
    post({ t: 'failed', id: 'id' in m ? m.id : null, message: oneLine(err) });
  }
});
