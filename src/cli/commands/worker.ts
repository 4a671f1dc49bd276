import { TapwardenError, quote } from '../../errors.js';
import type { Command } from '../command.js';

export const workerCommand: Command = {
  summary: "take sweep cells from a Redis queue ('tapwarden sweep --queue')",
  usage: `Usage: tapwarden worker --queue redis://HOST:PORT [--concurrency N] [--lock-seconds S]

Takes sweep batches from the queue and runs them until SIGINT or SIGTERM. Start any number, on
any machine that sees the recordings at the same paths as the sweep. A worker that dies
mid-batch stops renewing its lock; after --lock-seconds another worker takes the batch again.

Options:
  --queue URL         the Redis the sweep queues on
  --concurrency N     batches at a time in this process (default 1; one thread each)
  --lock-seconds S    how long a batch stays with a silent worker (default 30)
  -h, --help          this help`,
  options: {
    queue: { type: 'string' },
    concurrency: { type: 'string', default: '1' },
    'lock-seconds': { type: 'string', default: '30' },
  },
  positionals: [0, 0],
  async run(values) {
    const queue = values['queue'] as string | undefined;
    if (queue === undefined) throw new TapwardenError('TW_ERR_USAGE', { detail: 'worker: --queue is required; allowed: --queue redis://HOST:PORT' });
    const concurrency = Number(values['concurrency']);
    if (!Number.isInteger(concurrency) || concurrency < 1 || concurrency > 64) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `worker: --concurrency ${quote(values['concurrency'])} is not allowed; allowed: an integer from 1 to 64` });
    }
    const lockSeconds = Number(values['lock-seconds']);
    if (!(lockSeconds >= 1 && lockSeconds <= 3600)) {
      throw new TapwardenError('TW_ERR_USAGE', { detail: `worker: --lock-seconds ${quote(values['lock-seconds'])} is not allowed; allowed: seconds from 1 to 3600` });
    }
    const { serveQueue } = await import('../../sweep/queue.js');
    await serveQueue(queue, { concurrency, lockSeconds, log: (line) => process.stderr.write(`tapwarden worker: ${line}\n`) });
    return 0;
  },
};
