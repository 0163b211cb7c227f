/** SQLSTATE codes Larder branches on (PostgreSQL appendix A). Never match on message text. */
export const SqlState = {
  uniqueViolation: '23505',
  foreignKeyViolation: '23503',
  undefinedTable: '42P01',
  duplicateSchema: '42P06',
  duplicateTable: '42P07',
  adminShutdown: '57P01',
  queryCanceled: '57014',
  lockNotAvailable: '55P03',
  serializationFailure: '40001',
  deadlockDetected: '40P01',
} as const;

/** A Larder failure with a stable code callers can branch on; the cause is kept. */
export class LarderError extends Error {
  readonly code: string;
  constructor(code: string, message: string, options?: { cause?: unknown }) {
    super(message, options);
    this.name = 'LarderError';
    this.code = code;
  }
}

/** Bad command-line use: the CLI exits 2 on these. */
export class UsageError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('USAGE', message, options);
    this.name = 'UsageError';
  }
}

/** Configuration problems: the CLI exits 2 on these. */
export class ConfigError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('CONFIG', message, options);
    this.name = 'ConfigError';
  }
}

/** Input that cannot be stored faithfully (a file, a line, a key). */
export class InputError extends LarderError {
  constructor(message: string, options?: { cause?: unknown }) {
    super('INPUT', message, options);
    this.name = 'InputError';
  }
}

/** The SQLSTATE of a driver error, if it carries one. */
export function sqlState(err: unknown): string | undefined {
  if (typeof err === 'object' && err !== null && 'code' in err) {
    const code = (err as { code: unknown }).code;
    return typeof code === 'string' ? code : undefined;
  }
  return undefined;
}
