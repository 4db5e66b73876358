#!/usr/bin/env node
// Container health check: exit 0 when radcast's /healthz answers 2xx within the timeout, else 1.
// node:20-slim has no curl, and Node 20 has fetch built in, so this needs nothing installed.
// RADCAST_HEALTH_URL overrides the address (default: the config's default port on loopback).
const url = process.env.RADCAST_HEALTH_URL || 'http://127.0.0.1:8787/healthz';
const timeoutMs = Number(process.env.RADCAST_HEALTH_TIMEOUT_MS || 4000);

try {
  const res = await fetch(url, { signal: AbortSignal.timeout(timeoutMs) });
  await res.arrayBuffer();
  process.exitCode = res.ok ? 0 : 1;
  if (!res.ok) console.error(`healthcheck: ${url} answered ${res.status}`);
} catch (err) {
  console.error(`healthcheck: ${url} unreachable (${err?.name ?? 'error'}: ${err?.message ?? err})`);
  process.exitCode = 1;
}
