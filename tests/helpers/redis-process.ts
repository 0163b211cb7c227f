/**
 * Real redis-server processes a test starts on its own free loopback ports (to stop, kill and
 * restart them, or to form a cluster), cleaned up by the test's afterAll.
 */
import { type ChildProcess, execFileSync, spawn } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';

/** A port the OS says is free right now. */
export function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const srv = createServer();
    srv.once('error', reject);
    srv.listen(0, '127.0.0.1', () => {
      const addr = srv.address();
      srv.close(() => (typeof addr === 'object' && addr ? resolve(addr.port) : reject(new Error('no port'))));
    });
  });
}

function ping(port: number): boolean {
  try {
    return execFileSync('redis-cli', ['-p', String(port), 'ping'], {
      encoding: 'utf8',
      timeout: 2000,
      stdio: ['ignore', 'pipe', 'ignore'],
    }).includes('PONG');
  } catch {
    return false;
  }
}

async function waitFor(cond: () => boolean, what: string, ms = 10_000): Promise<void> {
  const end = Date.now() + ms;
  while (Date.now() < end) {
    if (cond()) return;
    await sleep(50);
  }
  throw new Error(`timed out waiting for ${what}`);
}

export class RedisProcess {
  readonly port: number;
  readonly dir: string;
  private readonly extra: readonly string[];
  private child: ChildProcess | undefined;

  private constructor(port: number, dir: string, extra: readonly string[]) {
    this.port = port;
    this.dir = dir;
    this.extra = extra;
  }

  /** Starts a redis-server in its own temp dir; `extra` are more server arguments. */
  static async start(extra: readonly string[] = []): Promise<RedisProcess> {
    const port = await freePort();
    const dir = mkdtempSync(join(tmpdir(), 'larder-redis-'));
    const p = new RedisProcess(port, dir, extra);
    await p.restart();
    return p;
  }

  get url(): string {
    return `redis://127.0.0.1:${this.port}`;
  }

  async restart(): Promise<void> {
    const args = [
      '--port',
      String(this.port),
      '--bind',
      '127.0.0.1',
      '--dir',
      this.dir,
      '--save',
      '',
      ...this.extra,
    ];
    this.child = spawn('redis-server', args, { stdio: 'ignore' });
    await waitFor(() => ping(this.port), `redis-server on port ${this.port}`);
  }

  /** SIGKILL: the server is gone at once, as in a crash. */
  async kill(): Promise<void> {
    const c = this.child;
    if (!c || c.exitCode !== null) return;
    const exited = new Promise((r) => c.once('exit', r));
    c.kill('SIGKILL');
    await exited;
    this.child = undefined;
  }

  async stop(): Promise<void> {
    await this.kill();
    rmSync(this.dir, { recursive: true, force: true });
  }
}

/** A three-master Redis Cluster on loopback, formed with `redis-cli --cluster create`. */
export class RedisClusterProcess {
  readonly nodes: RedisProcess[];
  private constructor(nodes: RedisProcess[]) {
    this.nodes = nodes;
  }

  static async start(masters = 3): Promise<RedisClusterProcess> {
    const nodes: RedisProcess[] = [];
    try {
      for (let i = 0; i < masters; i++) {
        nodes.push(
          await RedisProcess.start([
            '--cluster-enabled',
            'yes',
            '--cluster-config-file',
            'nodes.conf',
            '--appendonly',
            'no',
          ]),
        );
      }
      execFileSync(
        'redis-cli',
        [
          '--cluster',
          'create',
          ...nodes.map((n) => `127.0.0.1:${n.port}`),
          '--cluster-replicas',
          '0',
          '--cluster-yes',
        ],
        { stdio: 'ignore', timeout: 30_000 },
      );
      await waitFor(
        () =>
          nodes.every((n) =>
            execFileSync('redis-cli', ['-p', String(n.port), 'cluster', 'info'], {
              encoding: 'utf8',
            }).includes('cluster_state:ok'),
          ),
        'cluster_state:ok',
        20_000,
      );
    } catch (err) {
      for (const n of nodes) await n.stop();
      throw err;
    }
    return new RedisClusterProcess(nodes);
  }

  /** Seeds as `createRedisCache` takes them. */
  get url(): string {
    return `redis-cluster://${this.nodes.map((n) => `127.0.0.1:${n.port}`).join(',')}`;
  }

  async stop(): Promise<void> {
    for (const n of this.nodes) await n.stop();
  }
}
