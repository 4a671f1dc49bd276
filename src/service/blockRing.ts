/**
 * A bounded single-producer, single-consumer queue of input blocks in a SharedArrayBuffer, from
 * the input worker to a worker that runs another group of measurement channels: `slots` blocks
 * of `columns` channels of up to `frames` samples. A live producer never waits: a block that
 * finds the queue full is dropped (the producer counts it, as a capture device's buffer would),
 * so a slow group can never hold up the input path or the other groups. The consumer sleeps in
 * Atomics.waitAsync until a block is written, so its event loop stays free for requests.
 * Hand-written: the npm ring buffers move bytes or single values, not blocks of several float64
 * channels.
 */

/** Atomics.waitAsync (Node 16+; not yet in TypeScript's ES2022 library). */
const waitAsync = (Atomics as unknown as {
  waitAsync(a: Int32Array, i: number, v: number): { async: false; value: string } | { async: true; value: Promise<string> };
}).waitAsync;

const WRITE = 0;
const READ = 1;
const HEADER = 2;

export class BlockRing {
  private readonly header: Int32Array;
  private readonly lengths: Int32Array;
  private readonly data: Float64Array;
  /** Per slot, a view of each column (made once: a drain allocates no views). */
  private readonly views: Float64Array[][];

  constructor(
    readonly buffer: SharedArrayBuffer,
    readonly slots: number,
    readonly columns: number,
    readonly frames: number,
  ) {
    this.header = new Int32Array(buffer, 0, HEADER);
    this.lengths = new Int32Array(buffer, 4 * HEADER, slots);
    const at = Math.ceil((4 * (HEADER + slots)) / 8) * 8;
    this.data = new Float64Array(buffer, at, slots * columns * frames);
    this.views = Array.from({ length: slots }, (_, slot) =>
      Array.from({ length: columns }, (_, c) => this.data.subarray((slot * columns + c) * frames, (slot * columns + c + 1) * frames)),
    );
  }

  static create(slots: number, columns: number, frames: number): BlockRing {
    const at = Math.ceil((4 * (HEADER + slots)) / 8) * 8;
    return new BlockRing(new SharedArrayBuffer(at + 8 * slots * columns * frames), slots, columns, frames);
  }

  /** What another thread needs to open the same queue. */
  shape(): { buffer: SharedArrayBuffer; slots: number; columns: number; frames: number } {
    return { buffer: this.buffer, slots: this.slots, columns: this.columns, frames: this.frames };
  }

  /**
   * Producer: copies n frames of each column in. When the queue is full the block is dropped
   * (false), or, with `wait` (a file streamed as fast as the engines go: nothing is live), the
   * producer sleeps until the consumer frees a slot.
   */
  push(cols: readonly Float64Array[], n: number, wait = false): boolean {
    const w = Atomics.load(this.header, WRITE);
    for (let r = Atomics.load(this.header, READ); w - r >= this.slots; r = Atomics.load(this.header, READ)) {
      if (!wait) return false;
      Atomics.wait(this.header, READ, r, 100);
    }
    const slot = w % this.slots;
    const views = this.views[slot]!;
    for (let c = 0; c < this.columns; c++) views[c]!.set(cols[c]!.subarray(0, n));
    this.lengths[slot] = n;
    Atomics.store(this.header, WRITE, w + 1);
    Atomics.notify(this.header, WRITE);
    return true;
  }

  /** Consumer: hands each waiting block to `use` (views into the queue, valid during the call), oldest first. */
  drain(use: (cols: Float64Array[], n: number) => void): number {
    let r = Atomics.load(this.header, READ);
    const w = Atomics.load(this.header, WRITE);
    let done = 0;
    for (; r < w; r++, done++) {
      const slot = r % this.slots;
      use(this.views[slot]!, this.lengths[slot]!);
      Atomics.store(this.header, READ, r + 1);
      Atomics.notify(this.header, READ);
    }
    return done;
  }

  /** Consumer: resolves once a block beyond those drained is written (at once if one is). */
  async written(): Promise<void> {
    const w = Atomics.load(this.header, WRITE);
    if (w !== Atomics.load(this.header, READ)) return;
    const r = waitAsync(this.header, WRITE, w);
    if (r.async) await r.value;
  }
}
