/** The parts of jstat (no published types) the report statistics tests use. */
declare module 'jstat' {
  interface JStatStatic {
    /** Quantile of Student's t with `dof` degrees of freedom. */
    studentt: { inv(p: number, dof: number): number; cdf(x: number, dof: number): number };
    /** Two-sided t confidence interval [lo, hi] of a sample's mean at significance alpha. */
    tci(mean: number, alpha: number, sample: number[]): [number, number];
    /** Counts in `bins` equal bins over [min, max] of the data (the last bin holds the maximum). */
    histogram(data: number[], bins: number): number[];
    mean(data: number[]): number;
    stdev(data: number[], sample?: boolean): number;
  }
  const jStat: JStatStatic & { jStat: JStatStatic };
  export default jStat;
}
