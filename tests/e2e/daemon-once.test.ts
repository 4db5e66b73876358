/**
 * `radcast once` end to end on the demo config (a temp copy with its own store): exit code 0 when
 * every series was forecast, 1 when any failed, with a summary naming the failure.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { DEMO_END_MS, demoFixture, radcast, type DemoFixture } from './demo-fixture.ts';
import { EmbeddedStore } from '../../src/store/embedded.ts';

let fx: DemoFixture;
beforeAll(() => {
  // brennick-yard gets no readings: its cycle must fail alone.
  fx = demoFixture({ series: ['oskaveld-outdoor-temp', 'tarrow-hill'] });
});
afterAll(() => fx?.cleanup());

const AT = new Date(DEMO_END_MS + 5 * 60_000).toISOString(); // 00:05 local after the last reading

describe('radcast once (demo config)', () => {
  it('exits 0 with a JSON summary when every selected series is forecast', async () => {
    const r = await radcast(['once', '--config', fx.config, '--at', AT, '--series', 'oskaveld-outdoor-temp', 'tarrow-hill', '--json', '--workers', '1']);
    expect(r.stderr).not.toMatch(/"level":(50|60)/);
    expect(r.code).toBe(0);
    const sum = JSON.parse(r.stdout);
    expect(sum).toMatchObject({ series: 2, ok: 2, failed: 0, stale: 0 });
    const tarrow = sum.results.find((x: { series: string }) => x.series === 'tarrow-hill');
    expect(tarrow.issuedAt).toBe(DEMO_END_MS - 3600_000);
    expect(tarrow.peak.value).toBeGreaterThan(0);
    expect(Object.keys(sum.timingsMs)).toEqual(['read', 'prepare', 'fit', 'predict', 'write', 'score', 'drift']);
    const store = new EmbeddedStore({ path: fx.storePath });
    expect((await store.readLatestForecast('tarrow-hill'))?.points).toHaveLength(24);
    store.close();
  });

  it('exits 1 when a series fails, names it in the summary, and still forecasts the others', async () => {
    const r = await radcast(['once', '--config', fx.config, '--at', AT, '--series', 'brennick-yard', 'oskaveld-outdoor-temp', '--workers', '0']);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/brennick-yard\s+stale\s+INPUT_STALE/);
    expect(r.stdout).toMatch(/oskaveld-outdoor-temp\s+ok/);
    expect(r.stdout).toContain('1 ok, 0 failed, 1 stale');
    // The failure was logged as a JSON line with its code on stderr.
    expect(r.stderr).toMatch(/"series":"brennick-yard".*"code":"INPUT_STALE"/);
  });

  it('exits 2 on a bad --at', async () => {
    const r = await radcast(['once', '--config', fx.config, '--at', 'yesterday']);
    expect(r.code).toBe(2);
    expect(r.stderr).toContain('--at');
  });
});
