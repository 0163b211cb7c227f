/**
 * The two reference forecasts every score is shown beside (common practice in forecast
 * evaluation): naive, the last value at the cutoff for every horizon day; seasonal naive, the
 * value of the same weekday in the last week before the cutoff.
 *
 * `lastWeek` holds 7 values per series, days C-6 .. C (a day without a sales row is 0).
 */
export function naiveForecast(lastWeek: Float64Array, series: number, horizon: number): Float64Array {
  if (lastWeek.length !== series * 7) throw new RangeError('lastWeek must hold 7 values per series');
  const out = new Float64Array(series * horizon);
  for (let s = 0; s < series; s++) out.fill(lastWeek[s * 7 + 6]!, s * horizon, (s + 1) * horizon);
  return out;
}

/** Day C + 1 + j takes the value of day C - 6 + (j mod 7): the same weekday, whole weeks back. */
export function seasonalNaiveForecast(lastWeek: Float64Array, series: number, horizon: number): Float64Array {
  if (lastWeek.length !== series * 7) throw new RangeError('lastWeek must hold 7 values per series');
  const out = new Float64Array(series * horizon);
  for (let s = 0; s < series; s++) {
    for (let j = 0; j < horizon; j++) out[s * horizon + j] = lastWeek[s * 7 + (j % 7)]!;
  }
  return out;
}
