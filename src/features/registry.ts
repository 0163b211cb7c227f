import { calendar } from './calendar.js';
import { encodings } from './encodings.js';
import type { FamilyName, FeatureFamily } from './family.js';
import { hierarchy } from './hierarchy.js';
import { lags } from './lags.js';
import { prices } from './prices.js';
import { windows } from './windows.js';

/** Every feature family, in the order their columns appear in a snapshot. One line per family. */
export const FAMILIES: Readonly<Record<FamilyName, FeatureFamily<unknown>>> = Object.freeze({
  lags: lags as FeatureFamily<unknown>,
  windows: windows as FeatureFamily<unknown>,
  calendar: calendar as FeatureFamily<unknown>,
  prices: prices as FeatureFamily<unknown>,
  encodings: encodings as FeatureFamily<unknown>,
  hierarchy: hierarchy as FeatureFamily<unknown>,
});
