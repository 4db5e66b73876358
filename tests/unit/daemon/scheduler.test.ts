import { afterEach, describe, expect, it, vi } from 'vitest';
import { ManualClock, settle } from '../../../src/daemon/clock.ts';
import { clockCronDriver, nodeCronDriver } from '../../../src/daemon/cron-driver.ts';
import { Limiter } from '../../../src/daemon/limiter.ts';
import { Scheduler, type RunRequest } from '../../../src/daemon/scheduler.ts';
import { captureLogger } from './helpers.ts';

/** A cycle that stays "running" until the test resolves it. */
function controllable() {
  const started: string[] = [];
  const pending = new Map<string, Array<() => void>>();
  let active = 0;
  let maxActive = 0;
  const activeBySeries = new Map<string, number>();
  let maxPerSeries = 0;
  const run = async (series: string, _req: RunRequest) => {
    started.push(series);
    active++;
    maxActive = Math.max(maxActive, active);
    const n = (activeBySeries.get(series) ?? 0) + 1;
    activeBySeries.set(series, n);
    maxPerSeries = Math.max(maxPerSeries, n);
    await new Promise<void>((resolve) => {
      const list = pending.get(series) ?? [];
      list.push(resolve);
      pending.set(series, list);
    });
    active--;
    activeBySeries.set(series, activeBySeries.get(series)! - 1);
  };
  const finish = (series: string) => {
    const list = pending.get(series);
    const r = list?.shift();
    if (!r) throw new Error(`no running cycle of ${series}`);
    r();
  };
  return { run, finish, started, stats: () => ({ active, maxActive, maxPerSeries }) };
}

describe('Limiter', () => {
  it('never admits more than the limit and serves waiters in order', async () => {
    const lim = new Limiter(2);
    const order: number[] = [];
    const releases: Array<() => void> = [];
    const ps = [0, 1, 2, 3].map((i) => lim.acquire().then((rel) => { order.push(i); releases.push(rel); }));
    await settle();
    expect(order).toEqual([0, 1]);
    expect(lim.active).toBe(2);
    expect(lim.waiting).toBe(2);
    releases[0]();
    releases[0](); // idempotent: a second release frees nothing
    await settle();
    expect(order).toEqual([0, 1, 2]);
    expect(lim.active).toBe(2);
    lim.setLimit(3);
    await settle();
    expect(order).toEqual([0, 1, 2, 3]);
    await Promise.all(ps);
  });
});

describe('Scheduler with a fake clock', () => {
  const start = Date.UTC(2026, 2, 2, 10, 0, 30); // Monday 2026-03-02 10:00:30 UTC

  it('fires each series on its own cron expression in its own time zone', async () => {
    const clock = new ManualClock(start);
    const { logger } = captureLogger();
    const ticks: Array<{ series: string; at: number }> = [];
    const sched = new Scheduler({
      runSeries: async (series) => { ticks.push({ series, at: clock.now() }); },
      concurrency: 4,
      logger,
      driver: clockCronDriver(clock),
      clock,
    });
    sched.setSchedules([
      { series: 'every-15', cron: '*/15 * * * *', timeZone: 'UTC' },
      // 12:05 in Berlin (UTC+1 in March before the DST change) is 11:05 UTC.
      { series: 'berlin-noon', cron: '5 12 * * *', timeZone: 'Europe/Berlin' },
    ]);
    sched.start();
    await clock.advance(2 * 3600_000);
    await sched.flush();
    const iso = (s: string) => ticks.filter((t) => t.series === s).map((t) => new Date(t.at).toISOString());
    expect(iso('every-15')).toEqual([
      '2026-03-02T10:15:00.000Z', '2026-03-02T10:30:00.000Z', '2026-03-02T10:45:00.000Z',
      '2026-03-02T11:00:00.000Z', '2026-03-02T11:15:00.000Z', '2026-03-02T11:30:00.000Z',
      '2026-03-02T11:45:00.000Z', '2026-03-02T12:00:00.000Z',
    ]);
    expect(iso('berlin-noon')).toEqual(['2026-03-02T11:05:00.000Z']);
    await sched.stop(1000);
    expect(clock.pendingTimers).toBe(0);
  });

  it('never runs one series twice at once: ticks while it runs are skipped and counted', async () => {
    const clock = new ManualClock(start);
    const { logger, lines } = captureLogger();
    const c = controllable();
    const skips: string[] = [];
    const sched = new Scheduler({ runSeries: c.run, concurrency: 4, logger, driver: clockCronDriver(clock), clock, onSkip: (s, r) => skips.push(`${s}:${r}`) });
    sched.setSchedules([{ series: 'slow', cron: '* * * * *', timeZone: 'UTC' }]);
    sched.start();
    await clock.advance(60_000); // 10:01 tick starts a cycle
    expect(c.started).toEqual(['slow']);
    await clock.advance(3 * 60_000); // 10:02..10:04 ticks arrive while it runs
    expect(c.started).toEqual(['slow']);
    expect(skips).toEqual(['slow:busy', 'slow:busy', 'slow:busy']);
    expect(sched.trigger('slow')).toBe(false); // manual triggers obey the same rule
    expect(lines.some((l) => l.series === 'slow' && /still queued or running/.test(l.msg))).toBe(true);
    c.finish('slow');
    await settle();
    await clock.advance(60_000);
    expect(c.started).toEqual(['slow', 'slow']);
    expect(c.stats().maxPerSeries).toBe(1);
    c.finish('slow');
    await sched.stop(1000);
  });

  it('holds the global concurrency limit across series', async () => {
    const clock = new ManualClock(start);
    const { logger } = captureLogger();
    const c = controllable();
    const sched = new Scheduler({ runSeries: c.run, concurrency: 2, logger, driver: clockCronDriver(clock), clock });
    const names = ['a', 'b', 'c', 'd', 'e'];
    sched.setSchedules(names.map((series) => ({ series, cron: '0 * * * *', timeZone: 'UTC' })));
    sched.start();
    await clock.advance(3600_000);
    expect(c.started).toEqual(['a', 'b']);
    expect(sched.inFlight.sort()).toEqual(names);
    c.finish('a');
    await settle();
    expect(c.started).toEqual(['a', 'b', 'c']);
    for (const n of ['b', 'c']) c.finish(n);
    await settle();
    for (const n of ['d', 'e']) c.finish(n);
    await sched.flush();
    expect(c.stats().maxActive).toBe(2);
    expect(c.started.sort()).toEqual(names);
    await sched.stop(1000);
  });

  it('stop() disarms schedules, drops queued cycles, and waits for running ones within the bound', async () => {
    const clock = new ManualClock(start);
    const { logger } = captureLogger();
    const c = controllable();
    const sched = new Scheduler({ runSeries: c.run, concurrency: 1, logger, driver: clockCronDriver(clock), clock });
    sched.setSchedules(['a', 'b'].map((series) => ({ series, cron: '0 * * * *', timeZone: 'UTC' })));
    sched.start();
    await clock.advance(3600_000);
    expect(c.started).toEqual(['a']); // b queued behind the limit
    const stopping = sched.stop(5000);
    await settle();
    expect(sched.trigger('a')).toBe(false);
    c.finish('a');
    const res = await stopping;
    expect(res).toEqual({ finished: 1, abandoned: [] });
    expect(c.started).toEqual(['a']); // b never started
    await clock.advance(2 * 3600_000);
    expect(c.started).toEqual(['a']); // no more ticks
  });

  it('stop() gives up after the bound and aborts the running cycle', async () => {
    const clock = new ManualClock(start);
    const { logger } = captureLogger();
    let seen: AbortSignal | null = null;
    const sched = new Scheduler({
      runSeries: (_s, req) => { seen = req.signal; return new Promise(() => undefined); },
      concurrency: 1, logger, driver: clockCronDriver(clock), clock,
    });
    sched.setSchedules([{ series: 'stuck', cron: '0 * * * *', timeZone: 'UTC' }]);
    sched.start();
    expect(sched.trigger('stuck')).toBe(true);
    await settle();
    const stopping = sched.stop(30_000);
    await clock.advance(29_999);
    expect(seen!.aborted).toBe(false);
    await clock.advance(1);
    const res = await stopping;
    expect(res.abandoned).toEqual(['stuck']);
    expect(seen!.aborted).toBe(true);
  });

  it('setSchedules on reload re-arms only changed series and rejects a bad expression without changing anything', async () => {
    const clock = new ManualClock(start);
    const { logger } = captureLogger();
    const ticks: string[] = [];
    const sched = new Scheduler({ runSeries: async (s) => { ticks.push(s); }, concurrency: 2, logger, driver: clockCronDriver(clock), clock });
    sched.setSchedules([{ series: 'a', cron: '0 * * * *', timeZone: 'UTC' }, { series: 'b', cron: '0 * * * *', timeZone: 'UTC' }]);
    sched.start();
    expect(() => sched.setSchedules([{ series: 'a', cron: '61 * * * *', timeZone: 'UTC' }])).toThrowError(/SCHEDULE_INVALID|series=a/);
    await clock.advance(3600_000);
    expect(ticks.sort()).toEqual(['a', 'b']);
    sched.setSchedules([{ series: 'a', cron: '30 * * * *', timeZone: 'UTC' }]);
    await clock.advance(3600_000); // 11:30 a, b gone
    await sched.flush();
    expect(ticks.sort()).toEqual(['a', 'a', 'b']);
    await sched.stop(10);
  });
});

describe('schedules in the series time zone across daylight-saving changes', () => {
  // Europe/Berlin: summer time starts 2026-03-29 at 01:00 UTC and ends 2026-10-25 at 01:00 UTC
  // (EU rule: last Sunday of March / October, Directive 2000/84/EC; as in the IANA tz database
  // shipped with Node's Intl). The local days are 23 and 25 hours long. On the 25-hour day the
  // wall-clock hour 02:00-03:00 occurs twice; node-cron runs a matching local time once, at the
  // second occurrence (observed behaviour of node-cron 4.6, checked here for both drivers).
  const cases = [
    { day: 'spring-forward', fromUtc: Date.UTC(2026, 2, 28, 23, 0, 0), hours: 23, hourly: 23, night: [] as string[], skippedHour: null as number | null },
    { day: 'fall-back', fromUtc: Date.UTC(2026, 9, 24, 22, 0, 0), hours: 25, hourly: 24, night: ['2026-10-25T01:30:00.000Z'], skippedHour: 2 },
  ];
  afterEach(() => { vi.useRealTimers(); });
  for (const c of cases) {
    const expectedHours = Array.from({ length: c.hours }, (_, i) => i).filter((i) => i !== c.skippedHour);
    it(`${c.day} day: the fake-clock driver fires the hourly and the 02:30 refit like node-cron`, async () => {
      const clock = new ManualClock(c.fromUtc - 30_000);
      const { logger } = captureLogger();
      const at: Record<string, number[]> = { hourly: [], night: [] };
      const sched = new Scheduler({ runSeries: async (s) => { at[s].push(clock.now()); }, concurrency: 2, logger, driver: clockCronDriver(clock), clock });
      sched.setSchedules([{ series: 'hourly', cron: '0 * * * *', timeZone: 'Europe/Berlin' }, { series: 'night', cron: '30 2 * * *', timeZone: 'Europe/Berlin' }]);
      sched.start();
      await clock.advance(c.hours * 3600_000); // the whole local day, midnight to midnight
      await sched.flush();
      expect(at.hourly.map((t) => (t - c.fromUtc) / 3600_000)).toEqual(expectedHours);
      expect(at.hourly).toHaveLength(c.hourly);
      expect(at.night.map((t) => new Date(t).toISOString())).toEqual(c.night);
      await sched.stop(10);
    });
    it(`${c.day} day: the node-cron driver (fake timers) does the same`, async () => {
      vi.useFakeTimers({ now: c.fromUtc - 30_000, toFake: ['setTimeout', 'clearTimeout', 'Date', 'setInterval', 'clearInterval'] });
      const d = nodeCronDriver();
      const hourly: number[] = [];
      const night: string[] = [];
      const a = d.add({ name: 'h', expr: '0 * * * *', timeZone: 'Europe/Berlin', onTick: (x) => hourly.push(x.getTime()) });
      const b = d.add({ name: 'n', expr: '30 2 * * *', timeZone: 'Europe/Berlin', onTick: (x) => night.push(x.toISOString()) });
      await vi.advanceTimersByTimeAsync(c.hours * 3600_000);
      a.stop();
      b.stop();
      expect(hourly.map((t) => (t - c.fromUtc) / 3600_000)).toEqual(expectedHours);
      expect(night).toEqual(c.night);
    });
  }
});

describe('Scheduler input ordering', () => {
  it('holds a series until the in-flight cycle of an input it uses at target time is done, without taking a slot', async () => {
    const clock = new ManualClock(Date.UTC(2026, 2, 2, 10, 0, 30));
    const { logger } = captureLogger();
    const c = controllable();
    const sched = new Scheduler({ runSeries: c.run, concurrency: 1, logger, driver: clockCronDriver(clock), clock, waitFor: (s) => (s === 'load' ? ['temp'] : []) });
    // Inputs first in the schedule list: same-instant ticks fire in this order.
    sched.setSchedules([{ series: 'temp', cron: '0 * * * *', timeZone: 'UTC' }, { series: 'load', cron: '0 * * * *', timeZone: 'UTC' }, { series: 'other', cron: '0 * * * *', timeZone: 'UTC' }]);
    sched.start();
    await clock.advance(3600_000);
    expect(c.started).toEqual(['temp']);
    c.finish('temp');
    await settle();
    // 'other' took the free slot first: 'load' only queued for a slot once temp was done.
    expect(c.started).toEqual(['temp', 'other']);
    c.finish('other');
    await settle();
    expect(c.started).toEqual(['temp', 'other', 'load']);
    c.finish('load');
    await sched.stop(100);
  });
});

describe('node-cron driver', () => {
  afterEach(() => { vi.useRealTimers(); });

  it('ticks on the real node-cron schedule (driven by fake timers)', async () => {
    vi.useFakeTimers({ now: new Date('2026-03-02T10:00:30Z'), toFake: ['setTimeout', 'clearTimeout', 'Date', 'setInterval', 'clearInterval'] });
    const driver = nodeCronDriver();
    expect(driver.validate('*/5 * * * *')).toBeNull();
    expect(driver.validate('99 * * * *')).toMatch(/minute|99/);
    const at: string[] = [];
    const h = driver.add({ name: 'x', expr: '*/5 * * * *', timeZone: 'UTC', onTick: (d) => at.push(d.toISOString()) });
    await vi.advanceTimersByTimeAsync(11 * 60_000);
    h.stop();
    await vi.advanceTimersByTimeAsync(10 * 60_000);
    expect(at).toEqual(['2026-03-02T10:05:00.000Z', '2026-03-02T10:10:00.000Z']);
  });
});
