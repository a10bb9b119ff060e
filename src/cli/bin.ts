#!/usr/bin/env node
import { run } from './main.js';

// A reader that stops early (`roost suggest-eps … | head`) is not an error.
process.stdout.on('error', (err: NodeJS.ErrnoException) => {
  if (err.code === 'EPIPE') process.exit(process.exitCode ?? 0);
  throw err;
});

process.exitCode = await run(process.argv.slice(2));
