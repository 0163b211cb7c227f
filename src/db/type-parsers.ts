/**
 * Both drivers return the same JS values: dates stay ISO text (a `Date` would shift with the
 * process time zone), int8 and numeric become numbers (counts and 4-decimal prices fit a double).
 */
export const OID = { int8: 20, numeric: 1700, date: 1082 } as const;

export const valueParsers: Readonly<Record<number, (text: string) => unknown>> = {
  [OID.int8]: (v) => Number(v),
  [OID.numeric]: (v) => Number(v),
  [OID.date]: (v) => v,
};
