/** Public TypeScript API. */
export { defineConfig, loadConfig, type Config, type ConfigInput } from './config/config.js';
export { openDatabase } from './db/open.js';
export type { Db, DbSession } from './db/database.js';
