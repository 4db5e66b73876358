/**
 * The write buffer of the InfluxDB adapter with a fake sink and a fake clock: batching, flush
 * interval, retries with exact backoff delays (jitter off), the bound and its drop order, dedup of
 * rewritten points, refused points, flush() and close().
 */
import { describe, expect, it } from 'vitest';
import { StoreError } from '../../../src/store/influx/errors.ts';
import { lines, makeOutbox, settle } from './outbox-fakes.ts';

const make = makeOutbox;

describe('Outbox', () => {
  it('sends full batches at once and the rest after flushIntervalMs', async () => {
    const { box, sink, clock } = make();
    box.add(lines('forecast', 0, 12));
    await settle();
    // 12 points: full batches go at once; the drain then also takes the remainder.
    expect(sink.batches.map((b) => b.length)).toEqual([5, 5, 2]);
    box.add(lines('score', 100, 2));
    await clock.advance(999);
    expect(sink.batches.length).toBe(3);
    await clock.advance(1);
    expect(sink.batches.at(-1)).toEqual(['score v=100 100', 'score v=101 101']);
    expect(box.stats()).toMatchObject({ buffered: 0, written: 14, retries: 0, dropped: 0, failing: false });
  });

  it('keeps points through failures, retries after 100, 200, 400 ms and sends each point once', async () => {
    const { box, sink, clock, records } = make();
    sink.down = true;
    box.add(lines('forecast', 0, 3));
    await clock.advance(1_000); // flush interval -> attempt 1 fails
    expect(sink.attempts).toBe(1);
    expect(clock.pending()).toEqual([100]);
    await clock.advance(100); // attempt 2 fails
    expect(clock.pending()).toEqual([200]);
    await clock.advance(200); // attempt 3 fails
    expect(clock.pending()).toEqual([400]);
    expect(box.stats()).toMatchObject({ buffered: 3, retries: 3, failing: true, lastError: { code: 'STORE_UNREACHABLE' } });
    sink.down = false;
    await clock.advance(400);
    expect(sink.sent).toEqual(['forecast v=0 0', 'forecast v=1 1', 'forecast v=2 2']);
    expect(box.stats()).toMatchObject({ buffered: 0, written: 3, retries: 3, failing: false, lastError: null });
    const warns = records.filter((r) => r.msg === 'store write failed; points kept for retry');
    expect(warns.map((r) => r.obj.retryInMs)).toEqual([100, 200, 400]);
    expect(records.some((r) => r.level === 'info' && r.msg === 'store writes recovered')).toBe(true);
    // After a success the backoff starts again at its first delay.
    sink.down = true;
    box.add(lines('forecast', 10, 1));
    await clock.advance(1_000);
    expect(clock.pending()).toEqual([100]);
  });

  it('waits for a Retry-After longer than the backoff, but never beyond maxRetryDelayMs', async () => {
    const { box, sink, clock } = make();
    sink.down = true;
    sink.error = () => new StoreError('STORE_BUSY', 'busy', { retryAfterMs: 700 });
    box.add(lines('score', 0, 1));
    await clock.advance(1_000);
    expect(clock.pending()).toEqual([700]);
    sink.error = () => new StoreError('STORE_BUSY', 'busy', { retryAfterMs: 60_000 });
    await clock.advance(700);
    expect(clock.pending()).toEqual([1_600]);
  });

  it('at the bound drops the oldest forecasts first, counts and logs it, and keeps scores and health', async () => {
    const { box, sink, clock, records } = make({ capacity: 10 });
    sink.down = true;
    box.add(lines('score', 0, 2));
    box.add(lines('forecast', 0, 6));
    box.add(lines('health', 0, 2));
    await clock.advance(1_000); // failed attempts, points kept
    box.add(lines('forecast', 6, 3)); // 13 > 10: forecasts 0, 1, 2 go
    expect(box.stats()).toMatchObject({ buffered: 10, dropped: 3, droppedForecast: 3 });
    const warn = records.find((r) => r.msg === 'write buffer full: oldest points dropped');
    expect(warn?.level).toBe('warn');
    expect(warn?.obj).toMatchObject({ dropped: 3, droppedTotal: 3, capacity: 10 });
    sink.down = false;
    await box.flush();
    expect(sink.sent.sort()).toEqual(
      ['score v=0 0', 'score v=1 1', 'health v=0 0', 'health v=1 1', ...[3, 4, 5, 6, 7, 8].map((i) => `forecast v=${i} ${i}`)].sort(),
    );
  });

  it('drops the oldest other points only when no forecast is left', async () => {
    const { box, sink, clock } = make({ capacity: 4 });
    sink.down = true;
    box.add(lines('forecast', 0, 1));
    box.add(lines('score', 0, 3));
    await clock.advance(1_000);
    box.add(lines('health', 0, 2)); // 6 > 4: the forecast, then score 0
    expect(box.stats()).toMatchObject({ buffered: 4, dropped: 2, droppedForecast: 1 });
    sink.down = false;
    await clock.advance(100);
    expect(sink.sent.sort()).toEqual(['health v=0 0', 'health v=1 1', 'score v=1 1', 'score v=2 2']);
  });

  it('logs drops at most once per dropLogIntervalMs with the summed count', async () => {
    const { box, sink, clock, records } = make({ capacity: 2 });
    sink.down = true;
    box.add(lines('forecast', 0, 3)); // drops 1 -> logged at once
    box.add(lines('forecast', 3, 2)); // drops 2 -> held
    box.add(lines('forecast', 5, 1)); // drops 1 -> held
    const drops = () => records.filter((r) => r.msg === 'write buffer full: oldest points dropped');
    expect(drops().map((r) => r.obj.dropped)).toEqual([1]);
    await clock.advance(10_000);
    expect(drops().map((r) => r.obj.dropped)).toEqual([1, 3]);
    expect(box.stats().dropped).toBe(4);
  });

  it('a point written again while waiting replaces the waiting one (same key)', async () => {
    const { box, sink, clock } = make();
    box.add([{ kind: 'forecast', key: 'k1', line: 'fc value=1 10' }]);
    box.add([{ kind: 'forecast', key: 'k1', line: 'fc value=2 10' }]);
    expect(box.stats().buffered).toBe(1);
    await clock.advance(1_000);
    expect(sink.sent).toEqual(['fc value=2 10']);
  });

  it('a point rewritten while its first version is being sent is sent again afterwards', async () => {
    const { box, sink, clock } = make({ batchSize: 1 });
    sink.holdNext();
    box.add([{ kind: 'forecast', key: 'k1', line: 'fc value=1 10' }]);
    await settle();
    box.add([{ kind: 'forecast', key: 'k1', line: 'fc value=2 10' }]);
    sink.release!();
    await clock.advance(1_000);
    expect(sink.sent).toEqual(['fc value=1 10', 'fc value=2 10']);
    expect(box.stats().buffered).toBe(0);
  });

  it('points the server refuses are counted as rejected and not retried', async () => {
    const { box, sink, clock, records } = make();
    sink.down = true;
    sink.error = () => Object.assign(new StoreError('WRITE_REJECTED', 'partial write: field type conflict dropped=1'), { refusedPoints: 1 });
    box.add(lines('score', 0, 3));
    await clock.advance(1_000);
    expect(box.stats()).toMatchObject({ buffered: 0, rejected: 1, written: 2, retries: 0 });
    expect(clock.pending()).toEqual([]);
    expect(records.find((r) => r.level === 'error')?.msg).toBe('store refused points');
  });

  it('flush() sends at once, even during a retry wait, and rejects with the typed error while the store is down', async () => {
    const { box, sink, clock } = make();
    sink.down = true;
    box.add(lines('forecast', 0, 2));
    const err = await box.flush().then(
      () => null,
      (e: unknown) => e as StoreError,
    );
    expect(err?.code).toBe('STORE_UNREACHABLE');
    expect(err?.canRetry()).toBe(true);
    expect(box.stats().buffered).toBe(2);
    expect(clock.pending()).toEqual([100]);
    sink.down = false;
    await box.flush();
    expect(sink.sent).toEqual(['forecast v=0 0', 'forecast v=1 1']);
    expect(clock.pending()).toEqual([]);
  });

  it('close() keeps trying within closeTimeoutMs; a server back in time gets everything', async () => {
    const { box, sink, clock } = make();
    sink.down = true;
    box.add(lines('forecast', 0, 4));
    const closing = box.close();
    await clock.advance(250); // attempts at 0, 100 fail
    sink.down = false;
    await clock.advance(500);
    await closing;
    expect(sink.sent.length).toBe(4);
    expect(box.stats()).toMatchObject({ buffered: 0, dropped: 0, written: 4 });
  });

  it('close() gives up after closeTimeoutMs, counts the rest as dropped and logs an error; later writes throw STORE_CLOSED', async () => {
    const { box, sink, clock, records } = make({ closeTimeoutMs: 2_000 });
    sink.down = true;
    box.add(lines('forecast', 0, 3));
    box.add(lines('health', 0, 1));
    let done = false;
    const closing = box.close().then(() => (done = true));
    await clock.advance(1_999);
    expect(done).toBe(false);
    await clock.advance(1);
    await closing;
    expect(box.stats()).toMatchObject({ buffered: 0, dropped: 4, droppedForecast: 3 });
    const err = records.find((r) => r.level === 'error');
    expect(err?.msg).toBe('4 point(s) could not be written before close and are lost');
    expect(() => box.add(lines('forecast', 9, 1))).toThrow(expect.objectContaining({ code: 'STORE_CLOSED' }));
    expect(clock.pending()).toEqual([]);
  });
});
