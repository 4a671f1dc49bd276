/**
 * An online min/max decimator: a series of unknown length kept in at most 2 x `columns` entries.
 * Each column covers `windowsPerColumn` consecutive points; when the columns run out, neighbours
 * merge and the span doubles, so an hour and a week cost the same memory. A column keeps, per
 * numeric field, its minimum and its maximum; decimated output gives two entries per column (the
 * minima at the column's first time, the maxima at its last), so every extreme survives.
 */

export type Flat = Record<string, number>;

interface Column {
  first: number;
  last: number;
  count: number;
  min: Float64Array;
  max: Float64Array;
}

export class SeriesDecimator {
  private readonly cols: Column[] = [];
  windowsPerColumn = 1;

  constructor(
    readonly fields: readonly string[],
    readonly columns: number,
  ) {}

  push(time: number, values: ArrayLike<number>): void {
    let c = this.cols.at(-1);
    if (c === undefined || c.count === this.windowsPerColumn) {
      if (this.cols.length === 2 * this.columns) this.fold();
      c = { first: time, last: time, count: 0, min: new Float64Array(this.fields.length).fill(Infinity), max: new Float64Array(this.fields.length).fill(-Infinity) };
      this.cols.push(c);
    }
    c.last = time;
    c.count++;
    for (let i = 0; i < this.fields.length; i++) {
      const v = values[i]!;
      if (v < c.min[i]!) c.min[i] = v;
      if (v > c.max[i]!) c.max[i] = v;
    }
  }

  /** Merges neighbouring columns pairwise; each now covers twice as many points. */
  private fold(): void {
    const merged: Column[] = [];
    for (let i = 0; i < this.cols.length; i += 2) {
      const a = this.cols[i]!;
      const b = this.cols[i + 1];
      if (b === undefined) {
        merged.push(a);
        continue;
      }
      for (let k = 0; k < this.fields.length; k++) {
        a.min[k] = Math.min(a.min[k]!, b.min[k]!);
        a.max[k] = Math.max(a.max[k]!, b.max[k]!);
      }
      a.last = b.last;
      a.count += b.count;
      merged.push(a);
    }
    this.cols.length = 0;
    this.cols.push(...merged);
    this.windowsPerColumn *= 2;
  }

  /**
   * The kept series: one entry per point while nothing was merged, else two per column (minima,
   * then maxima). `entry` builds an output object from a time and the field values.
   */
  entries<T>(entry: (time: number, values: Float64Array, role: 'point' | 'min' | 'max') => T): T[] {
    const out: T[] = [];
    for (const c of this.cols) {
      if (c.count === 1) out.push(entry(c.first, c.min, 'point'));
      else {
        out.push(entry(c.first, c.min, 'min'));
        out.push(entry(c.last, c.max, 'max'));
      }
    }
    return out;
  }
}
