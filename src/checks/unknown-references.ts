import type { z } from 'zod';
import { checkParams, defineCheck } from './check-definition.js';
import type { FindingDraft } from './finding.js';

export const unknownReferencesParams = checkParams(
  [
    'unknown-item',
    'unknown-store',
    'unknown-region',
    'store-without-region',
    'item-without-dept',
    'item-without-category',
  ],
  {},
);
export type UnknownReferencesParams = z.output<typeof unknownReferencesParams>;

const COLS = ['item_id', 'store_id', 'region_id', 'observed', 'rank', 'message', 'details'] as const;

/** Sales and prices whose items or stores the hierarchy lacks, and hierarchy rows with missing parents. */
export const unknownReferences = defineCheck({
  name: 'unknown-references',
  description:
    'sales or prices for unknown items or stores; stores without a region; items without department or category',
  codes: {
    'unknown-item': { severity: 'block', meaning: 'sales or prices for an item missing from items' },
    'unknown-store': { severity: 'block', meaning: 'sales or prices for a store missing from stores' },
    'unknown-region': { severity: 'warn', meaning: 'benefit days for a region no store belongs to' },
    'store-without-region': { severity: 'block', meaning: 'a store with no region' },
    'item-without-dept': { severity: 'block', meaning: 'an item with no department' },
    'item-without-category': { severity: 'block', meaning: 'an item with no category' },
  },
  params: unknownReferencesParams,
  reads: ['prices'],
  async run(db, ctx) {
    // Sales reference items and stores through the series table (tens of thousands of rows), so
    // these are small anti-joins; the prices table is checked in the shared prices pass instead.
    await ctx.insertFrom(
      'unknown-item',
      COLS,
      `SELECT item_id, NULL::text, NULL::text, count(*)::float8, count(*)::float8,
         format('item %s has sales in %s store(s) but is not in items', item_id, count(*)),
         jsonb_build_object('table', 'sales', 'series', count(*), 'rows', NULL)
       FROM series s WHERE NOT EXISTS (SELECT 1 FROM items i WHERE i.item_id = s.item_id)
       GROUP BY item_id ORDER BY item_id`,
    );
    await ctx.insertFrom(
      'unknown-store',
      COLS,
      `SELECT NULL::text, store_id, NULL::text, count(*)::float8, count(*)::float8,
         format('store %s has sales for %s item(s) but is not in stores', store_id, count(*)),
         jsonb_build_object('table', 'sales', 'series', count(*), 'rows', NULL)
       FROM series s WHERE NOT EXISTS (SELECT 1 FROM stores t WHERE t.store_id = s.store_id)
       GROUP BY store_id ORDER BY store_id`,
    );
    await ctx.insertFrom(
      'store-without-region',
      COLS,
      `SELECT NULL::text, store_id, NULL::text, NULL::float8, 1::float8, format('store %s has no region', store_id), '{}'::jsonb
       FROM stores WHERE region_id IS NULL OR btrim(region_id) = '' ORDER BY store_id`,
    );
    for (const [code, col, what] of [
      ['item-without-dept', 'dept_id', 'department'],
      ['item-without-category', 'category_id', 'category'],
    ] as const) {
      await ctx.insertFrom(
        code,
        COLS,
        `SELECT item_id, NULL::text, NULL::text, NULL::float8, 1::float8, format('item %s has no ${what}', item_id), '{}'::jsonb
         FROM items WHERE ${col} IS NULL OR btrim(${col}) = '' ORDER BY item_id`,
      );
    }
    await ctx.insertFrom(
      'unknown-region',
      COLS,
      `SELECT NULL::text, NULL::text, region_id, count(*)::float8, count(*)::float8,
         format('%s benefit day(s) for region %s, which no store belongs to', count(*), region_id),
         jsonb_build_object('table', 'benefit_days', 'series', NULL, 'rows', count(*))
       FROM benefit_days b WHERE NOT EXISTS (SELECT 1 FROM stores t WHERE t.region_id = b.region_id)
       GROUP BY region_id ORDER BY region_id`,
    );

    const items = new Set(
      (await db.query<{ id: string }>('SELECT item_id AS id FROM items')).rows.map((r) => r.id),
    );
    const stores = new Set(
      (await db.query<{ id: string }>('SELECT store_id AS id FROM stores')).rows.map((r) => r.id),
    );
    const badItems = new Map<string, number>();
    const badStores = new Map<string, number>();
    await ctx.prices({
      prices(g) {
        if (!items.has(g.itemId)) badItems.set(g.itemId, (badItems.get(g.itemId) ?? 0) + g.n);
        if (!stores.has(g.storeId)) badStores.set(g.storeId, (badStores.get(g.storeId) ?? 0) + g.n);
      },
    });
    const drafts: FindingDraft[] = [];
    for (const [item, rows] of badItems) {
      drafts.push({
        code: 'unknown-item',
        itemId: item,
        observed: rows,
        rank: rows,
        details: { table: 'prices', series: null, rows },
        message: `item ${item} has ${rows} price row(s) but is not in items`,
      });
    }
    for (const [store, rows] of badStores) {
      drafts.push({
        code: 'unknown-store',
        storeId: store,
        observed: rows,
        rank: rows,
        details: { table: 'prices', series: null, rows },
        message: `store ${store} has ${rows} price row(s) but is not in stores`,
      });
    }
    await ctx.write(drafts);
  },
});
