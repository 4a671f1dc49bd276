import { runBatch, type Batch, type BatchResult } from './cells.js';

/** The local pool's thread entry (piscina calls the default export with each batch). */
export default function run(batch: Batch): BatchResult {
  return runBatch(batch);
}
