/**
 * Deterministic white Gaussian noise: xoshiro128** (Blackman & Vigna, 2018) feeding the
 * Marsaglia polar method. Hand-written because it runs per sample inside the engine, must
 * allocate nothing, and must give the same sequence on every machine for a given seed so that
 * fixed-point replays are reproducible bit for bit.
 */
export class GaussianNoise {
  private s0 = 0;
  private s1 = 0;
  private s2 = 0;
  private s3 = 0;
  private spare = 0;
  private hasSpare = false;

  constructor(seed: number) {
    this.reseed(seed);
  }

  reseed(seed: number): void {
    // splitmix32 expands the seed into a non-zero state.
    let z = seed >>> 0;
    const next = (): number => {
      z = (z + 0x9e3779b9) >>> 0;
      let t = z ^ (z >>> 16);
      t = Math.imul(t, 0x21f0aaad);
      t ^= t >>> 15;
      t = Math.imul(t, 0x735a2d97);
      return (t ^ (t >>> 15)) >>> 0;
    };
    this.s0 = next();
    this.s1 = next();
    this.s2 = next();
    this.s3 = next() | 1;
    this.hasSpare = false;
  }

  /** A uniform 32-bit unsigned integer. */
  nextUint32(): number {
    const result = Math.imul(rotl(Math.imul(this.s1, 5), 7), 9) >>> 0;
    const t = this.s1 << 9;
    this.s2 ^= this.s0;
    this.s3 ^= this.s1;
    this.s1 ^= this.s2;
    this.s0 ^= this.s3;
    this.s2 ^= t;
    this.s3 = rotl(this.s3, 11);
    return result;
  }

  /** Uniform in (-1, 1). */
  private uniformSigned(): number {
    return (this.nextUint32() + 0.5) / 2147483648 - 1;
  }

  /** A standard normal deviate. */
  next(): number {
    if (this.hasSpare) {
      this.hasSpare = false;
      return this.spare;
    }
    let u: number;
    let v: number;
    let s: number;
    do {
      u = this.uniformSigned();
      v = this.uniformSigned();
      s = u * u + v * v;
    } while (s >= 1 || s === 0);
    const m = Math.sqrt((-2 * Math.log(s)) / s);
    this.spare = v * m;
    this.hasSpare = true;
    return u * m;
  }

  /**
   * Fills out[start, end) with deviates of the given standard deviation: the same sequence as
   * calling next() that many times. Written out in one loop (the generator's state in locals)
   * because a call that returns a double boxes it unless the compiler inlines the call, and this
   * runs per sample in the engine.
   */
  fill(out: Float64Array, sigma: number, start = 0, end = out.length): void {
    let i = start;
    if (i < end && this.hasSpare) {
      this.hasSpare = false;
      out[i++] = sigma * this.spare;
    }
    let s0 = this.s0;
    let s1 = this.s1;
    let s2 = this.s2;
    let s3 = this.s3;
    while (i < end) {
      let u = 0;
      let v = 0;
      let s = 0;
      do {
        // Two xoshiro128** outputs (as nextUint32), each mapped to (-1, 1) as uniformSigned.
        let r = Math.imul(rotl(Math.imul(s1, 5), 7), 9) >>> 0;
        let t = s1 << 9;
        s2 ^= s0;
        s3 ^= s1;
        s1 ^= s2;
        s0 ^= s3;
        s2 ^= t;
        s3 = rotl(s3, 11);
        u = (r + 0.5) / 2147483648 - 1;
        r = Math.imul(rotl(Math.imul(s1, 5), 7), 9) >>> 0;
        t = s1 << 9;
        s2 ^= s0;
        s3 ^= s1;
        s1 ^= s2;
        s0 ^= s3;
        s2 ^= t;
        s3 = rotl(s3, 11);
        v = (r + 0.5) / 2147483648 - 1;
        s = u * u + v * v;
      } while (s >= 1 || s === 0);
      const m = Math.sqrt((-2 * Math.log(s)) / s);
      out[i++] = sigma * (u * m);
      if (i < end) out[i++] = sigma * (v * m);
      else {
        this.spare = v * m;
        this.hasSpare = true;
      }
    }
    this.s0 = s0;
    this.s1 = s1;
    this.s2 = s2;
    this.s3 = s3;
  }
}

function rotl(x: number, k: number): number {
  return (x << k) | (x >>> (32 - k));
}
