import { setTimeout as sleep } from 'node:timers/promises';
import type { FeatureCache } from '../../src/publish/feature-cache.js';

/** Keys `cacheScript` touches under prefix `p`, for cleanup. */
export const scriptKeys = (p: string) => [
  `${p}:{a}:1`,
  `${p}:{a}:2`,
  `${p}:{b}:3`,
  `${p}:ptr`,
  `${p}:seq`,
  `${p}:gone`,
];

/** What a real Redis answers to `cacheScript` (checked against one in feature-cache.test.ts). */
export const SCRIPT_ANSWERS = [
  ['010203', null, '7468726565'],
  ['two', 'three'],
  3,
  1,
  0,
  null,
  '1',
  1,
  2,
  null,
  2,
  null,
];

/**
 * A script of every FeatureCache operation, returning what each answered; keys carry two hash
 * tags so a Cluster has to split the multi-key commands.
 */
export async function cacheScript(c: FeatureCache, p: string): Promise<unknown[]> {
  const k1 = `${p}:{a}:1`;
  const k2 = `${p}:{a}:2`;
  const k3 = `${p}:{b}:3`;
  const out: unknown[] = [];
  await c.setMany(
    [
      [k1, Buffer.from([1, 2, 3])],
      [k2, 'two'],
    ],
    60_000,
  );
  await c.setMany([[k3, 'three']]);
  out.push((await c.getBuffers([k1, `${p}:gone`, k3])).map((b) => b?.toString('hex') ?? null));
  out.push(await c.getStrings([k2, k3]));
  out.push(await c.countExisting([k1, k2, k3, `${p}:gone`]));
  // PERSIST counts only keys that had an expiry.
  out.push(await c.persistMany([k1, k3, `${p}:gone`]));
  out.push(await c.persistMany([k1]));
  out.push(await c.swap(`${p}:ptr`, '1'));
  out.push(await c.swap(`${p}:ptr`, '2'));
  out.push(await c.incr(`${p}:seq`), await c.incr(`${p}:seq`));
  await c.expireMany([k2], 1);
  await sleep(1100);
  out.push(await c.getString(k2), await c.countExisting([k1, k2, k3]));
  await c.deleteMany([k1]);
  out.push(await c.getBuffer(k1));
  return out;
}
