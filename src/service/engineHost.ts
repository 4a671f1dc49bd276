import { EventEmitter } from 'node:events';
import { Worker } from 'node:worker_threads';
import type { EngineSettings, HandoffReason, WindowReport } from '../engine/dualPath.js';
import type { ControlOp, FromWorker, WeightsReply, WorkerInit } from './protocol.js';

export interface HostEvents {
  processed: [n: number, seconds: number];
  window: [report: WindowReport];
  handoff: [snapshot: { version: number; weights: number[]; sample: number; reason: HandoffReason }];
  rollback: [sample: number, reason: 'supervisor' | 'forced'];
  output: [block: Float64Array];
  failed: [message: string];
}

/**
 * The main thread's side of the engine worker: a bounded queue of blocks in flight. A block
 * offered while `capacity` blocks wait is dropped and counted as an overrun, so a slow engine
 * never makes the capture side wait.
 */
export class EngineHost extends EventEmitter<HostEvents> {
  overruns = 0;
  inFlight = 0;
  samples = 0;
  blocks = 0;
  saturations = { adaptive: 0, clean: 0 };
  nonFiniteSamples = 0;
  private readonly worker: Worker;
  private nextId = 1;
  private closing = false;
  private readonly pending = new Map<number, (w: WeightsReply) => void>();

  constructor(
    readonly settings: EngineSettings,
    readonly capacity: number,
    wantOutput: boolean,
  ) {
    super();
    const init: WorkerInit = { settings, wantOutput };
    this.worker = new Worker(new URL('./engineWorker.js', import.meta.url), { workerData: init });
    this.worker.on('message', (m: FromWorker) => this.receive(m));
    this.worker.on('error', (err) => this.emit('failed', err.message));
    this.worker.on('exit', (code) => {
      if (!this.closing) this.emit('failed', `the engine worker exited with code ${code}`);
    });
  }

  get hasRoom(): boolean {
    return this.inFlight < this.capacity;
  }

  /** Queues a block; false (and an overrun) when the queue is full. */
  submit(ref: Float64Array, des: Float64Array, n: number): boolean {
    if (!this.hasRoom) {
      this.overruns++;
      return false;
    }
    this.inFlight++;
    this.worker.postMessage({ t: 'block', ref, des, n }, [ref.buffer as ArrayBuffer, des.buffer as ArrayBuffer]);
    return true;
  }

  private receive(m: FromWorker): void {
    switch (m.t) {
      case 'done':
        this.inFlight--;
        this.samples += m.n;
        this.blocks++;
        this.saturations = m.saturations;
        this.nonFiniteSamples = m.nonFinite;
        this.emit('processed', m.n, m.seconds);
        if (m.output) this.emit('output', m.output);
        break;
      case 'window':
        this.emit('window', m.report);
        break;
      case 'handoff':
        this.emit('handoff', m);
        break;
      case 'rollback':
        this.emit('rollback', m.sample, m.reason);
        break;
      case 'reply':
        this.pending.get(m.id)?.(m.weights);
        this.pending.delete(m.id);
        break;
    }
  }

  private request(make: (id: number) => object): Promise<WeightsReply> {
    const id = this.nextId++;
    return new Promise((resolve) => {
      this.pending.set(id, resolve);
      this.worker.postMessage(make(id));
    });
  }

  control(op: ControlOp): Promise<WeightsReply> {
    return this.request((id) => ({ t: 'control', op, id }));
  }

  weights(): Promise<WeightsReply> {
    return this.request((id) => ({ t: 'weights', id }));
  }

  restore(weights: number[]): Promise<WeightsReply> {
    return this.request((id) => ({ t: 'restore', weights, id }));
  }

  async close(): Promise<void> {
    this.closing = true;
    await this.worker.terminate();
  }
}
