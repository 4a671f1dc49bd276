/**
 * A doubled circular buffer: every sample is written twice, L apart, so the last L samples are
 * always contiguous at buf[pos .. pos+L), newest first. No modulo in the tap loop.
 */
export class DelayLine<T extends Float64Array | Float32Array> {
  readonly buf: T;
  pos = 0;

  constructor(
    readonly length: number,
    make: (n: number) => T,
  ) {
    this.buf = make(2 * length);
  }

  /** Pushes v and returns the sample that fell out (x[n-L]). */
  push(v: number): number {
    const L = this.length;
    this.pos = this.pos === 0 ? L - 1 : this.pos - 1;
    const old = this.buf[this.pos]!;
    this.buf[this.pos] = v;
    this.buf[this.pos + L] = v;
    return old;
  }

  /** Takes over another line's samples and position (same length). */
  copyFrom(other: DelayLine<T>): void {
    this.buf.set(other.buf);
    this.pos = other.pos;
  }

  clear(): void {
    this.buf.fill(0);
    this.pos = 0;
  }
}
