#!/usr/bin/env node
// The `cansight` command: loads the TypeScript sources through tsx and hands over to services/cli.
import { register } from 'tsx/esm/api';

register();
const { main } = await import('../services/cli/main.ts');
await main(process.argv.slice(2));
