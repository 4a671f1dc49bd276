import { runBatch, type Batch, type BatchResult } from './cells.js';

/**
 * BullMQ's sandboxed processor for `tapwarden worker`: runs in its own thread, so the worker's
 * event loop keeps the batch's lock alive while the batch runs.
 *
 * Fault injection for the queue's own tests (DEVELOPERS.md): TAPWARDEN_FAULT=worker-kill kills
 * the whole worker process with SIGKILL as it starts its first batch, as a crash or a pulled
 * plug would.
 */
export default function process_(job: { data: Batch }): BatchResult {
  if (process.env['TAPWARDEN_FAULT'] === 'worker-kill') process.kill(process.pid, 'SIGKILL');
  return runBatch(job.data);
}
