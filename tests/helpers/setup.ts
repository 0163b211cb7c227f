// Fails the run on promises nobody awaited: a swallowed rejection hides a real bug.
process.on('unhandledRejection', (reason) => {
  throw reason instanceof Error ? reason : new Error(`unhandled rejection: ${String(reason)}`);
});
