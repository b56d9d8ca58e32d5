#!/usr/bin/env node
// Entry point of the `fringe` command: loads the TypeScript sources through tsx, so a fresh
// clone runs after `npm install` with no build step.
import { register } from 'tsx/esm/api';

register();
const { main } = await import('./main.ts');
process.exitCode = await main(process.argv.slice(2));
