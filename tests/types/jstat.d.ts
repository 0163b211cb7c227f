/** The few jstat functions the tests use as an independent reference (jstat ships no types). */
declare module 'jstat' {
  export const jStat: {
    negbin: { pdf(k: number, r: number, p: number): number };
    poisson: { pdf(k: number, lambda: number): number; cdf(k: number, lambda: number): number };
  };
  const _default: { jStat: typeof jStat };
  export default _default;
}
