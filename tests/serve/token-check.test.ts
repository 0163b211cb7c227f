import { describe, expect, it } from 'vitest';
import { createTokenCheck } from '../../src/serve/token-check.js';

describe('bearer token check', () => {
  const check = createTokenCheck(['token-one-0123456789', 'token-two-abcdefghij']);
  it.each([
    ['Bearer token-one-0123456789', true],
    ['Bearer token-two-abcdefghij', true],
    // The scheme name is case-insensitive (RFC 7235 section 2.1).
    ['bearer token-two-abcdefghij', true],
    ['Bearer  token-one-0123456789 ', true],
    ['Bearer token-one-012345678', false],
    ['Bearer token-one-01234567890', false],
    ['Bearer TOKEN-ONE-0123456789', false],
    ['Basic token-one-0123456789', false],
    ['token-one-0123456789', false],
    ['Bearer ', false],
    ['', false],
  ])('%j -> %s', (header, ok) => expect(check(header)).toBe(ok));
  it('refuses a missing header, and everything when no token is configured', () => {
    expect(check(undefined)).toBe(false);
    expect(createTokenCheck([])('Bearer anything-at-all-here')).toBe(false);
  });
});
