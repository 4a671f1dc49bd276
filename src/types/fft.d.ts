declare module 'fft.js' {
  /** fft.js (indutny): radix-4 FFT on interleaved (re, im) arrays. */
  export default class FFT {
    constructor(size: number);
    readonly size: number;
    createComplexArray(): number[];
    /** Real input; fills bins 0..size/2 of out (interleaved). */
    realTransform(out: ArrayLike<number>, data: ArrayLike<number>): void;
    completeSpectrum(spectrum: ArrayLike<number>): void;
    transform(out: ArrayLike<number>, data: ArrayLike<number>): void;
    /** Complex inverse, scaled by 1/size. */
    inverseTransform(out: ArrayLike<number>, data: ArrayLike<number>): void;
  }
}
