import type { Command } from 'commander';
import { ConfigError } from '../../db/errors.js';
import { buildServer } from '../../serve/http-server.js';
import { createMetrics } from '../../serve/metrics.js';
import { createReader } from '../../serve/reader.js';
import type { CliContext } from '../context.js';
import { positiveIntOption } from './publish.js';

export function register(program: Command, ctx: CliContext): void {
  program
    .command('serve')
    .description('serve feature reads over HTTP (bearer-token auth; cache first, PostgreSQL fallback)')
    .option('--port <n>', 'port to listen on (default: serve.port, 8080)', positiveIntOption('--port'))
    .option('--host <address>', 'address to listen on (default: serve.host, 127.0.0.1)')
    .option('--redis <url>', 'Redis to read (default: REDIS_URL or redis.url; none: the in-process cache)')
    .option('--log-level <level>', 'server log level (fatal, error, warn, info, debug)', 'warn')
    .action(async (o: { port?: number; host?: string; redis?: string; logLevel: string }) => {
      const config = await ctx.config();
      if (config.serve.tokens.length === 0) {
        throw new ConfigError('serve: no tokens configured: set serve.tokens in the config or LARDER_TOKENS');
      }
      const db = await ctx.db();
      const metrics = createMetrics();
      const reader = await createReader({
        config,
        db,
        ...(o.redis ? { redisUrl: o.redis } : {}),
        events: metrics.readerEvents,
      });
      ctx.onClose(() => reader.close());
      const app = buildServer({ reader, config, metrics, logLevel: o.logLevel });
      ctx.onClose(() => app.close());
      const port = o.port ?? config.serve.port;
      const host = o.host ?? config.serve.host;
      await app.listen({ port, host });
      if (reader.cache.kind === 'memory') {
        ctx.err(
          'larder: no Redis configured (REDIS_URL): reads come from the database until a publish in this process',
        );
      }
      ctx.out(
        `serving on http://${host}:${port} (cache: ${reader.cache.kind}, ${reader.cacheReady() ? 'ready' : 'not reachable'})`,
      );
      // Runs until SIGINT or SIGTERM, or until the launcher (bin/larder.js) that started this
      // process is gone; closing (on the way out) drains requests in flight. The listeners stay:
      // a Ctrl-C reaches both the launcher and this process, and the launcher passes it on, so a
      // second signal arrives while closing.
      await new Promise<void>((resolve) => {
        process.on('SIGINT', resolve);
        process.on('SIGTERM', resolve);
        process.on('SIGHUP', resolve);
        if (process.channel) {
          process.once('disconnect', resolve);
          process.channel.unref();
        }
      });
    });
}
