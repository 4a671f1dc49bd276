import { parentPort, workerData } from 'node:worker_threads';
import { DualPathEngine } from '../engine/dualPath.js';
import type { FromWorker, ToWorker, WeightsReply, WorkerInit } from './protocol.js';

/**
 * The engine's thread: blocks arrive in order as messages, are processed as they come, and
 * each is acknowledged with its processing time. Control requests are applied between blocks.
 */
const { settings, wantOutput } = workerData as WorkerInit;
const port = parentPort!;
const post = (m: FromWorker, transfer: ArrayBuffer[] = []): void => port.postMessage(m, transfer);

const engine = new DualPathEngine(settings, {
  onWindow: (report) => post({ t: 'window', report }),
  onHandoff: (s) => post({ t: 'handoff', version: s.version, weights: Array.from(s.weights), sample: s.sample, reason: s.reason }),
  onRollback: (sample, reason) => post({ t: 'rollback', sample, reason }),
});
let cleanOut = new Float64Array(0);
let adaptiveOut = new Float64Array(0);

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
  switch (m.t) {
    case 'block': {
      if (cleanOut.length < m.n) {
        cleanOut = new Float64Array(m.n);
        adaptiveOut = new Float64Array(m.n);
      }
      const t0 = process.hrtime.bigint();
      engine.process(m.ref, m.des, cleanOut, adaptiveOut, m.n);
      const seconds = Number(process.hrtime.bigint() - t0) / 1e9;
      const output = wantOutput ? cleanOut.slice(0, m.n) : null;
      post(
        {
          t: 'done',
          n: m.n,
          seconds,
          saturations: { adaptive: engine.adaptiveSaturations, clean: engine.cleanSaturations },
          nonFinite: engine.nonFiniteSamples,
          output,
        },
        output ? [output.buffer as ArrayBuffer] : [],
      );
      break;
    }
    case 'control': {
      const op = m.op;
      if (op.kind === 'handoff') engine.handoff('forced');
      else if (op.kind === 'adaptation') engine.adapting = !op.frozen;
      else if (op.kind === 'handoffs') engine.handoffsHeld = op.frozen;
      else if (op.kind === 'rollback') engine.rollback('forced');
      else engine.reset();
      post({ t: 'reply', id: m.id, weights: weights() });
      break;
    }
    case 'restore':
      engine.restore(m.weights);
      post({ t: 'reply', id: m.id, weights: weights() });
      break;
    case 'weights':
      post({ t: 'reply', id: m.id, weights: weights() });
      break;
  }
});
