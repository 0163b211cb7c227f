import pg from 'pg';
import { expect, test } from 'vitest';
import { copyOut } from '../../src/db/copy-out.js';
import { useTestDb } from '../helpers/db.js';
import { databaseUrl } from '../helpers/servers.js';

const t = useTestDb(import.meta.url);

const text = async (chunks: AsyncIterable<Uint8Array>) => {
  const parts: Buffer[] = [];
  for await (const c of chunks) parts.push(Buffer.from(c));
  return Buffer.concat(parts).toString('utf8');
};

test('COPY TO STDOUT yields exactly the rows the server sends, in text and across socket reads', async () => {
  const { db } = t();
  // 300k rows of varying width: many socket reads, message headers split at every offset.
  const n = 300000;
  const got = await text(
    db.copyTo(`COPY (SELECT g, repeat('x', g % 97) FROM generate_series(1, ${n}) g) TO STDOUT`),
  );
  let want = '';
  for (let g = 1; g <= n; g++) want += `${g}\t${'x'.repeat(g % 97)}\n`;
  expect(got.length).toBe(want.length);
  expect(got === want).toBe(true);
  // Large rows: one CopyData message spans several socket reads.
  const wide = await text(
    db.copyTo(`COPY (SELECT repeat('ab', 200000) FROM generate_series(1, 3)) TO STDOUT`),
  );
  expect(wide).toBe(`${'ab'.repeat(200000)}\n`.repeat(3));
  // An empty result and the connection's next statement.
  expect(await text(db.copyTo('COPY (SELECT 1 WHERE false) TO STDOUT'))).toBe('');
  expect((await db.query<{ n: number }>('SELECT 3::int AS n')).rows).toEqual([{ n: 3 }]);
});

test('a server error in the middle of a COPY read is the error the reader sees; the session goes on', async () => {
  const { db } = t();
  // Division by zero at row 150000, after many rows were sent (SQLSTATE 22012).
  const bad = 'COPY (SELECT 1 / (150000 - g) FROM generate_series(1, 200000) g) TO STDOUT';
  await expect(text(db.copyTo(bad))).rejects.toMatchObject({ code: '22012' });
  await db.session(async (s) => {
    let seen = 0;
    await expect(
      (async () => {
        for await (const c of s.copyTo(bad)) seen += c.length;
      })(),
    ).rejects.toMatchObject({ code: '22012' });
    expect(seen).toBeGreaterThan(0);
    expect((await s.query<{ n: number }>('SELECT 4::int AS n')).rows).toEqual([{ n: 4 }]);
  });
  // NOTICEs raised while the COPY runs are skipped, not mistaken for data.
  await db.exec(`CREATE FUNCTION loud(i int) RETURNS int LANGUAGE plpgsql AS $$
    BEGIN IF i % 1000 = 0 THEN RAISE NOTICE 'at %', i; END IF; RETURN i; END $$`);
  const got = await text(db.copyTo('COPY (SELECT loud(g) FROM generate_series(1, 5000) g) TO STDOUT'));
  expect(got).toBe(Array.from({ length: 5000 }, (_, i) => `${i + 1}\n`).join(''));
});

test('a COPY still queued when its connection dies fails with the connection error, not a crash', async () => {
  const { db } = t();
  const client = new pg.Client({ connectionString: await databaseUrl() });
  await client.connect();
  client.on('error', () => {}); // the terminated connection reports here too
  const pid = (await client.query<{ pid: number }>('SELECT pg_backend_pid() AS pid')).rows[0]!.pid;
  const sleeping = client.query('SELECT pg_sleep(30)').then(
    () => null,
    (e: Error) => e,
  );
  // Queued behind the sleep: never submitted, so it never took the socket.
  const { chunks } = copyOut(client, 'COPY (SELECT 1) TO STDOUT');
  await new Promise((r) => setTimeout(r, 100));
  await db.query('SELECT pg_terminate_backend($1)', [pid]);
  expect(await sleeping).toBeInstanceOf(Error);
  await expect(
    (async () => {
      for await (const _ of chunks);
    })(),
  ).rejects.toThrow(/terminat|Connection/i);
  await client.end().catch(() => {});
});
