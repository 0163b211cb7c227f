import { join } from 'node:path';
import { formatDay } from '../core/days.js';
import { eventOccurrences } from './chain-calendar.js';
import type { DemoCatalog } from './chain-catalog.js';
import { ChunkWriter } from './chunk-writer.js';
import type { ChainDays } from './demand-model.js';
import type { ChainFaultPlan } from './fault-plan.js';

/** Quotes a CSV field when it holds a separator, a quote or a line break (RFC 4180). */
export function csvField(s: string): string {
  return /[",\r\n;\t]/.test(s) ? `"${s.replaceAll('"', '""')}"` : s;
}

export interface StaticCounts {
  readonly items: number;
  readonly stores: number;
  readonly calendar: number;
  readonly events: number;
  readonly benefitDays: number;
  readonly correctionItems: number;
}

/**
 * Writes the small tables: hierarchy (without the unknown items, whose rows go to
 * corrections/items.csv), the calendar with its gap (the day goes to corrections/calendar.csv),
 * events and benefit days.
 */
export async function writeStaticFiles(
  dir: string,
  catalog: DemoCatalog,
  chain: ChainDays,
  plan: ChainFaultPlan,
): Promise<StaticCounts> {
  const open = (name: string, header: string) => {
    const w = new ChunkWriter(join(dir, name));
    w.line(header);
    return w;
  };
  const stores = open('stores.csv', 'store_id,region_id');
  for (const s of catalog.stores) stores.line(`${csvField(s.id)},${csvField(s.regionId)}`);

  const items = open('items.csv', 'item_id,dept_id,category_id');
  const fixItems = open('corrections/items.csv', 'item_id,dept_id,category_id');
  for (const it of catalog.items) {
    (it.unknown ? fixItems : items).line(`${csvField(it.id)},${csvField(it.dept)},${csvField(it.category)}`);
  }

  const calendar = open('calendar.csv', 'day');
  const fixCalendar = open('corrections/calendar.csv', 'day');
  for (let i = 0; i < chain.n; i++)
    (i === plan.calendarGap ? fixCalendar : calendar).line(formatDay(chain.first + i));

  const events = open('events.csv', 'day,name,kind');
  for (const e of eventOccurrences(chain.first, chain.first + chain.n - 1)) {
    events.line(`${formatDay(e.day)},${csvField(e.name)},${e.kind}`);
  }

  const benefit = open('benefit_days.csv', 'region_id,day');
  catalog.regions.forEach((r, ri) => {
    const flags = chain.benefit[ri] as Uint8Array;
    for (let i = 0; i < chain.n; i++)
      if (flags[i]) benefit.line(`${csvField(r.id)},${formatDay(chain.first + i)}`);
  });

  const all = [stores, items, fixItems, calendar, fixCalendar, events, benefit];
  for (const w of all) await w.close();
  return {
    items: items.lines - 1,
    stores: stores.lines - 1,
    calendar: calendar.lines - 1,
    events: events.lines - 1,
    benefitDays: benefit.lines - 1,
    correctionItems: fixItems.lines - 1,
  };
}
