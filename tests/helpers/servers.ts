import { execFileSync } from 'node:child_process';

/**
 * Where the integration tests find their servers: DATABASE_URL / REDIS_URL when set; otherwise
 * testcontainers when a Docker engine answers; otherwise a loud failure (never a silent skip).
 */
let pgUrl: Promise<string> | undefined;
let redisUrl: Promise<string> | undefined;

function dockerAnswers(): boolean {
  try {
    execFileSync('docker', ['info'], { stdio: 'ignore', timeout: 5000 });
    return true;
  } catch {
    return false;
  }
}

const HOW =
  'set DATABASE_URL (e.g. postgres://postgres@127.0.0.1:5432/test) and REDIS_URL ' +
  '(e.g. redis://127.0.0.1:6379), run `.ci/run` which starts both, or start a Docker engine';

export function databaseUrl(): Promise<string> {
  pgUrl ??= (async () => {
    if (process.env.DATABASE_URL) return process.env.DATABASE_URL;
    if (!dockerAnswers()) throw new Error(`integration tests need PostgreSQL: ${HOW}`);
    const { GenericContainer } = await import('testcontainers');
    const c = await new GenericContainer('postgres:16')
      .withEnvironment({ POSTGRES_HOST_AUTH_METHOD: 'trust', POSTGRES_DB: 'test' })
      .withExposedPorts(5432)
      .start();
    return `postgres://postgres@${c.getHost()}:${c.getMappedPort(5432)}/test`;
  })();
  return pgUrl;
}

export function redisServerUrl(): Promise<string> {
  redisUrl ??= (async () => {
    if (process.env.REDIS_URL) return process.env.REDIS_URL;
    if (!dockerAnswers()) throw new Error(`integration tests need Redis: ${HOW}`);
    const { GenericContainer } = await import('testcontainers');
    const c = await new GenericContainer('redis:7').withExposedPorts(6379).start();
    return `redis://${c.getHost()}:${c.getMappedPort(6379)}`;
  })();
  return redisUrl;
}
