#!/usr/bin/env node
// Entry point of the `fringe` command: loads the TypeScript sources through tsx, so a fresh
// clone runs after `npm install` with no build step.
import { register } from 'tsx/esm/api';

register();
// A closed pipe (`fringe export … | head`) ends the output, not the process with a trace.
process.stdout.on('error', (error) => {
  if (error.code === 'EPIPE') process.exit(0);
  throw error;
});
const { main } = await import('./main.ts');
process.exitCode = await main(process.argv.slice(2));
