import { Worker } from 'node:worker_threads';
import type { Config } from '../config/schema.js';
import { TapwardenError } from '../errors.js';
import { fanOut, type RunSink } from '../run/run.js';
import { channelGroups, measurementChannels, referenceChannels } from '../config/schema.js';
import { BlockRing } from './blockRing.js';
import type { ControlOp, FromWorker, RingInit, ToWorker, WeightsReply, WorkerInit } from './protocol.js';
import type { Episode } from './captureRecorder.js';
import type { Telemetry } from './telemetry.js';

/** How long a request waits for the worker before it is answered with TW_ERR_ENGINE_FAILED. */
const REQUEST_TIMEOUT_MS = 10_000;

/**
 * Fault injection for the service's own tests (DEVELOPERS.md): TAPWARDEN_FAULT=main-stall:MS
 * blocks the main thread for MS ms at the first tick, as a flood of requests would.
 */
const stallMs = Number(/^main-stall:(\d+)$/.exec(process.env['TAPWARDEN_FAULT'] ?? '')?.[1] ?? 0);

export interface HostCallbacks {
  /** The feed's status message is due (one per feed.intervalSeconds of stream time). */
  tick(streamSeconds: number): void;
  state(up: boolean, reason: string): void;
  warning(message: string): void;
  ended(): void;
  /** A captured episode is complete. */
  episode(e: Episode): void;
  /** The worker died or stopped answering: requests now fail fast. */
  failed(message: string): void;
}

/**
 * The main thread's side of the engine threads (one per group of measurement channels,
 * stream.workers; the first owns the input). Records and events go to the sinks as they arrive;
 * requests (weights, control) go to the thread of the channel they name, or to every thread,
 * are answered by id (the replies merged in channel order), and fail fast with
 * TW_ERR_ENGINE_FAILED once any thread is gone.
 */
export class EngineHost {
  failure: string | null = null;
  private readonly workers: Worker[];
  /** Per measurement channel, the thread that runs it. */
  private readonly owner = new Map<number, number>();
  private readonly order: readonly number[];
  private readonly sink: Required<RunSink>;
  private nextId = 1;
  private closing = false;
  private stalled = false;
  private readonly pending = new Map<number, { resolve: (w: WeightsReply) => void; reject: (e: Error) => void; timer: NodeJS.Timeout }>();

  constructor(
    config: Config,
    file: string | null,
    sampleRate: number,
    readonly telemetry: Telemetry,
    sinks: readonly RunSink[],
    private readonly cb: HostCallbacks,
  ) {
    this.sink = fanOut(sinks);
    const groups = channelGroups(config);
    const measured = measurementChannels(config);
    this.order = measured;
    const columns = (g: number[]) => referenceChannels(config).length + g.length;
    const frames = config.stream.blockFrames;
    const rings: RingInit[] = groups.slice(1).map((group) => ({ ...BlockRing.create(config.stream.queueBlocks, columns(group), frames).shape(), group }));
    this.workers = groups.map((group, g) => {
      for (const i of group) this.owner.set(measured[i]!, g);
      const init: WorkerInit = { config, file, sampleRate, telemetry: this.telemetry.buffer, group, input: g === 0, rings: g === 0 ? rings : [rings[g - 1]!] };
      const w = new Worker(new URL('./worker.js', import.meta.url), { workerData: init });
      w.on('message', (m: FromWorker) => this.receive(m));
      w.on('error', (err) => this.fail(`the engine worker failed: ${err.message}`));
      w.on('exit', (code) => {
        if (!this.closing) this.fail(`the engine worker exited with code ${code}`);
      });
      return w;
    });
  }

  private fail(message: string): void {
    if (this.failure !== null) return;
    this.failure = message;
    for (const [id, p] of this.pending) {
      clearTimeout(p.timer);
      p.reject(new TapwardenError('TW_ERR_ENGINE_FAILED', { reason: message }));
      this.pending.delete(id);
    }
    this.cb.failed(message);
  }

  private receive(m: FromWorker): void {
    switch (m.t) {
      case 'record':
        this.sink.onRecord(m.record);
        break;
      case 'event':
        this.sink.onEvent(m.event, m.weights);
        break;
      case 'tick':
        if (stallMs > 0 && !this.stalled) {
          this.stalled = true;
          const until = performance.now() + stallMs;
          while (performance.now() < until);
        }
        this.cb.tick(m.streamSeconds);
        break;
      case 'state':
        this.cb.state(m.up, m.reason);
        break;
      case 'warning':
        this.cb.warning(m.message);
        break;
      case 'ended':
        this.cb.ended();
        break;
      case 'episode':
        this.cb.episode(m.episode);
        break;
      case 'reply': {
        const p = this.pending.get(m.id);
        if (p) {
          clearTimeout(p.timer);
          this.pending.delete(m.id);
          p.resolve(m.weights);
        }
        break;
      }
      case 'failed':
        if (m.id === null) this.fail(m.message);
        else {
          const p = this.pending.get(m.id);
          this.pending.delete(m.id);
          if (p) {
            clearTimeout(p.timer);
            p.reject(new TapwardenError('TW_ERR_ENGINE_FAILED', { reason: m.message }));
          }
        }
        break;
    }
  }

  private requestOne(worker: Worker, make: (id: number) => ToWorker): Promise<WeightsReply> {
    if (this.failure !== null) return Promise.reject(new TapwardenError('TW_ERR_ENGINE_FAILED', { reason: this.failure }));
    const id = this.nextId++;
    return new Promise((resolve, reject) => {
      const timer = setTimeout(() => this.fail(`the engine worker did not answer within ${REQUEST_TIMEOUT_MS / 1000} s`), REQUEST_TIMEOUT_MS);
      this.pending.set(id, { resolve, reject, timer });
      worker.postMessage(make(id));
    });
  }

  /** To the thread of `channel`, or to every thread (null), in turn; the replies merged in channel order. */
  private async request(channel: number | null, make: (id: number) => ToWorker): Promise<WeightsReply> {
    const targets = channel === null ? this.workers : [this.workers[this.owner.get(channel) ?? 0]!];
    const replies: WeightsReply[] = [];
    for (const w of targets) replies.push(await this.requestOne(w, make));
    const all = replies.flatMap((r) => r.channels);
    if (channel !== null) return { channels: all };
    return { channels: this.order.flatMap((ch) => all.filter((c) => c.channel === ch)) };
  }

  /** Starts the source and the other groups' threads (after the HTTP side is listening). */
  start(): void {
    for (const w of this.workers) w.postMessage({ t: 'start' } satisfies ToWorker);
  }

  /** An operator action on one measurement channel, or on every one (null). */
  control(op: ControlOp, channel: number | null = null): Promise<WeightsReply> {
    return this.request(channel, (id) => ({ t: 'control', op, channel, id }));
  }

  weights(): Promise<WeightsReply> {
    return this.request(null, (id) => ({ t: 'weights', id }));
  }

  restore(weights: number[], channel: number): Promise<WeightsReply> {
    return this.request(channel, (id) => ({ t: 'restore', weights, channel, id }));
  }

  /** Stops the source (the input thread first), playback and the other threads; answers with the final weights. */
  stop(): Promise<WeightsReply> {
    return this.request(null, (id) => ({ t: 'stop', id }));
  }

  async close(): Promise<void> {
    this.closing = true;
    for (const p of this.pending.values()) clearTimeout(p.timer);
    await Promise.all(this.workers.map((w) => w.terminate()));
  }
}
