import { randomUUID } from 'node:crypto';
import { fileURLToPath } from 'node:url';
import { Queue, QueueEvents, Worker } from 'bullmq';
import { Redis } from 'ioredis';
import { TapwardenError, oneLine, quote } from '../errors.js';
import { failedBatch, type Batch, type BatchResult } from './cells.js';

/**
 * Sweeps on a BullMQ queue (Redis) for labs that outgrow one machine: the sweep puts its batches
 * on the queue and collects their results; `tapwarden worker` processes take them. A worker runs
 * each batch in a sandboxed thread (BullMQ's processor file), so its own event loop keeps
 * renewing the job's lock; a worker that dies mid-batch stops renewing it, and BullMQ's stalled
 * job check hands the batch to another worker.
 */

export const QUEUE_NAME = 'tapwarden-sweep';

export interface Connection {
  host: string;
  port: number;
  db: number;
  password?: string;
}

export function connectionOf(url: string): Connection {
  let u: URL;
  try {
    u = new URL(url);
  } catch {
    u = new URL('invalid:');
  }
  const port = Number(u.port || 6379);
  const db = Number(u.pathname.replace(/^\//, '') || 0);
  if (u.protocol !== 'redis:' || u.hostname === '' || !Number.isInteger(port) || !Number.isInteger(db)) {
    throw new TapwardenError('TW_ERR_USAGE', { detail: `--queue ${quote(url)} is not allowed; allowed: redis://HOST:PORT (optionally redis://:PASSWORD@HOST:PORT/DB)` });
  }
  return { host: u.hostname, port, db, ...(u.password ? { password: decodeURIComponent(u.password) } : {}) };
}

/** Connects once, without retrying, and pings: a queue that cannot be reached is one coded line. */
export async function probe(url: string, timeoutMs = 3000): Promise<Connection> {
  const connection = connectionOf(url);
  const r = new Redis({ ...connection, lazyConnect: true, connectTimeout: timeoutMs, retryStrategy: () => null, maxRetriesPerRequest: 0, enableOfflineQueue: false });
  let cause = '';
  r.on('error', (err: Error) => (cause ||= oneLine(err)));
  try {
    await r.connect();
    await r.ping();
  } catch (err) {
    throw new TapwardenError('TW_ERR_QUEUE', { url, reason: cause || oneLine(err) || 'no answer' });
  } finally {
    r.disconnect();
  }
  return connection;
}

/** Options every connection BullMQ makes here gets: fail rather than queue commands forever. */
const bullConnection = (c: Connection) => ({ ...c, maxRetriesPerRequest: null, retryStrategy: (times: number) => (times > 20 ? null : Math.min(1000, 50 * times)) });

/**
 * Puts the batches on the queue and calls `onResult` as each one finishes. A batch BullMQ gives
 * up on (its workers died more often than it retries) fails its cells with TW_ERR_QUEUE.
 */
export async function runOnQueue(
  url: string,
  batches: readonly Batch[],
  onResult: (result: BatchResult) => void,
  onQueued: (count: number) => void,
): Promise<void> {
  const connection = bullConnection(await probe(url));
  const queue = new Queue(QUEUE_NAME, { connection });
  const events = new QueueEvents(QUEUE_NAME, { connection });
  const failures: string[] = [];
  const note = (err: Error) => failures.push(oneLine(err));
  queue.on('error', note);
  events.on('error', note);
  try {
    await events.waitUntilReady();
    const sweepId = randomUUID();
    const jobs = await queue.addBulk(
      batches.map((data, i) => ({
        name: 'batch',
        data,
        opts: { jobId: `${sweepId}-${i}`, attempts: 1, removeOnComplete: { age: 3600 }, removeOnFail: { age: 86400 } },
      })),
    );
    onQueued(jobs.length);
    await Promise.all(
      jobs.map(async (job, i) => {
        const batch = batches[i]!;
        let result: BatchResult;
        try {
          result = (await job.waitUntilFinished(events)) as BatchResult;
        } catch (err) {
          result = failedBatch(batch, { code: 'TW_ERR_QUEUE', message: `the queue gave up on this batch: ${oneLine(err)}` });
        }
        onResult(result);
      }),
    );
  } finally {
    await Promise.allSettled([events.close(), queue.close()]);
  }
}

export interface WorkerOptions {
  /** How long a batch's lock lasts without renewal: a dead worker's batch moves on after it. */
  readonly lockSeconds: number;
  readonly concurrency: number;
  readonly log: (line: string) => void;
}

/** Takes batches from the queue until SIGINT or SIGTERM. */
export async function serveQueue(url: string, opts: WorkerOptions): Promise<void> {
  const connection = bullConnection(await probe(url));
  const processor = fileURLToPath(new URL('./queueProcessor.js', import.meta.url));
  const lockDuration = Math.round(opts.lockSeconds * 1000);
  const worker = new Worker(QUEUE_NAME, processor, {
    connection,
    concurrency: opts.concurrency,
    useWorkerThreads: true,
    lockDuration,
    stalledInterval: Math.max(500, Math.round(lockDuration / 2)),
    maxStalledCount: 3,
  });
  worker.on('error', (err) => opts.log(`queue error: ${oneLine(err)}`));
  worker.on('completed', (job) => opts.log(`batch ${job.id} done (${(job.data as Batch).cells.length} cells of ${(job.data as Batch).recording})`));
  worker.on('failed', (job, err) => opts.log(`batch ${job?.id ?? '?'} failed: ${oneLine(err)}`));
  await worker.waitUntilReady();
  opts.log(`taking sweep batches from ${url} (queue ${QUEUE_NAME}, ${opts.concurrency} at a time)`);
  await new Promise<void>((resolve) => {
    const stop = () => resolve();
    process.once('SIGINT', stop);
    process.once('SIGTERM', stop);
  });
  await worker.close();
}
