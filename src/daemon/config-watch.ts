/**
 * Watches the config file for changes. Editors often replace a file (write a temp file, rename it
 * over), which ends a watch on the file itself, so the directory is watched and events are
 * filtered by name. Bursts of events are debounced; a change is only reported when the file's
 * content hash differs from the last one reported (touching the file is not a change).
 */
import { watch, readFileSync, type FSWatcher } from 'node:fs';
import { createHash } from 'node:crypto';
import path from 'node:path';
import type { Logger } from 'pino';
import { systemClock, type Clock, type TimerHandle } from './clock.ts';

export interface ConfigWatcherOptions {
  file: string;
  onChange: () => void;
  logger: Logger;
  /** Quiet time after the last event before the change is reported. */
  debounceMs?: number;
  clock?: Clock;
}

export function contentHash(file: string): string | null {
  try {
    return createHash('sha256').update(readFileSync(file)).digest('hex');
  } catch {
    return null;
  }
}

export class ConfigWatcher {
  readonly #opts: Required<Omit<ConfigWatcherOptions, 'clock'>> & { clock: Clock };
  #watcher: FSWatcher | null = null;
  #timer: TimerHandle | null = null;
  #lastHash: string | null;

  constructor(opts: ConfigWatcherOptions) {
    this.#opts = { debounceMs: 250, clock: systemClock, ...opts };
    this.#lastHash = contentHash(opts.file);
  }

  start(): void {
    if (this.#watcher) return;
    const dir = path.dirname(path.resolve(this.#opts.file));
    const base = path.basename(this.#opts.file);
    this.#watcher = watch(dir, { persistent: false }, (_event, name) => {
      if (name !== null && name !== base) return;
      this.#schedule();
    });
    this.#watcher.on('error', (err) => this.#opts.logger.warn({ err, file: this.#opts.file }, 'config watch failed; SIGHUP still reloads'));
  }

  /** Tell the watcher the current content was applied (after a SIGHUP reload), so it is not reported again. */
  markApplied(): void {
    this.#lastHash = contentHash(this.#opts.file);
  }

  stop(): void {
    this.#watcher?.close();
    this.#watcher = null;
    if (this.#timer) this.#opts.clock.clearTimeout(this.#timer);
    this.#timer = null;
  }

  async flush(): Promise<void> {}

  #schedule(): void {
    if (this.#timer) this.#opts.clock.clearTimeout(this.#timer);
    this.#timer = this.#opts.clock.setTimeout(() => {
      this.#timer = null;
      const h = contentHash(this.#opts.file);
      if (h === null || h === this.#lastHash) return; // mid-replace (missing) or unchanged
      this.#lastHash = h;
      this.#opts.onChange();
    }, this.#opts.debounceMs);
  }
}
