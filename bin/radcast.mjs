#!/usr/bin/env node
// Thin launcher: runs the TypeScript CLI through tsx's loader so no build step is needed.
import { register } from 'tsx/esm/api';
register();
await import('../src/cli/main.ts');
