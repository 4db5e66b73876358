/**
 * The settings grid of `radcast tune` and its combinations. Each combination is the series' own
 * config entry with the tuned keys replaced, resolved by the config layer exactly like a config
 * file (src/config/resolve.ts), so a combination the config would refuse (a window shorter than
 * the lags plus the horizon, more centres than training samples) is refused here too, with the
 * same message.
 */
import type { Config, SeriesEntry } from '../config/schema.ts';
import { resolveAll, type ResolvedSeries } from '../config/resolve.ts';
import { expandLags, formatDurationMs, parseDurationMs, toSteps, type LagSpec } from '../config/duration.ts';
import type { ForecastSettings } from '../forecast/types.ts';
import type { WidthMode } from '../model/types.ts';

/** A window as written: a step count or a duration ("8w"). */
export type WindowSpec = number | string;

export interface TuneGrid {
  windows: WindowSpec[];
  centres: number[];
  widthModes: WidthMode[];
  /** null = keep the series' ridge (not tuned). */
  ridges: number[] | null;
  /** null = keep the series' lags (not tuned). */
  lagSets: LagSpec[][] | null;
}

/** The tuned keys of one combination, as they would be written in the config. */
export interface CandidateValues {
  window: WindowSpec;
  centres: number;
  widthMode: WidthMode;
  ridge?: number;
  lags?: LagSpec[];
}

export interface TuneCandidate {
  /** Position in the grid (windows outermost, then centres, width modes, ridges, lag sets). */
  id: number;
  values: CandidateValues;
  label: string;
  settings: ForecastSettings;
  windowSteps: number;
}

export interface RejectedCandidate {
  values: CandidateValues;
  label: string;
  code: string;
  message: string;
  hint: string;
}

/** The grid of a series: the config's tune section, each dimension replaced by `over` when given. */
export function gridFor(entry: SeriesEntry, over: Partial<TuneGrid> = {}): TuneGrid {
  const t = entry.tune;
  return {
    windows: over.windows ?? [...t.windows],
    centres: over.centres ?? [...t.centres],
    widthModes: over.widthModes ?? [...t.widthModes],
    ridges: over.ridges !== undefined ? over.ridges : t.ridges.length ? [...t.ridges] : null,
    lagSets: over.lagSets !== undefined ? over.lagSets : t.lagSets.length ? t.lagSets.map((l) => [...l]) : null,
  };
}

/** Lags as written, e.g. "1-24,168". */
export function lagsLabel(lags: readonly LagSpec[]): string {
  return lags.map(String).join(',');
}

export function candidateLabel(v: CandidateValues): string {
  const parts = [`window=${v.window}`, `K=${v.centres}`, v.widthMode];
  if (v.ridge !== undefined) parts.push(`ridge=${v.ridge}`);
  if (v.lags) parts.push(`lags=${lagsLabel(v.lags)}`);
  return parts.join(' ');
}

function uniqueBy<T>(xs: readonly T[], key: (x: T) => string): T[] {
  const seen = new Set<string>();
  return xs.filter((x) => {
    const k = key(x);
    if (seen.has(k)) return false;
    seen.add(k);
    return true;
  });
}

/**
 * Every combination of the grid for series `seriesIndex` of a loaded config. `seed` replaces
 * fit.seed of every combination (k-means++ seeding), so a run is repeatable and every combination
 * is fitted with the same random source.
 */
export function buildCandidates(config: Config, seriesIndex: number, grid: TuneGrid, opts: { seed?: number } = {}): { candidates: TuneCandidate[]; rejected: RejectedCandidate[]; total: number } {
  const entry = config.series[seriesIndex];
  if (!entry) throw new RangeError(`no series at index ${seriesIndex}`);
  // "1w" and 168 are the same window of hourly steps: tried once.
  const step = parseDurationMs(entry.step);
  const stepKey = (w: WindowSpec) => {
    const r = step.ok ? toSteps(w, step.value, 'window') : null;
    return r?.ok ? `s${r.value}` : `x${w}`;
  };
  const windows = uniqueBy(grid.windows, stepKey);
  const centres = uniqueBy(grid.centres, String);
  const widthModes = uniqueBy(grid.widthModes, String);
  const ridges: Array<number | undefined> = grid.ridges ? uniqueBy(grid.ridges, String) : [undefined];
  const lagSets: Array<LagSpec[] | undefined> = grid.lagSets ? uniqueBy(grid.lagSets, (l) => JSON.stringify(l)) : [undefined];
  const candidates: TuneCandidate[] = [];
  const rejected: RejectedCandidate[] = [];
  let id = 0;
  for (const window of windows) {
    for (const k of centres) {
      for (const widthMode of widthModes) {
        for (const ridge of ridges) {
          for (const lags of lagSets) {
            const values: CandidateValues = { window, centres: k, widthMode, ...(ridge !== undefined ? { ridge } : {}), ...(lags ? { lags } : {}) };
            const label = candidateLabel(values);
            const changed: SeriesEntry = {
              ...entry,
              window,
              centres: k,
              widthMode,
              ...(ridge !== undefined ? { ridge } : {}),
              ...(lags ? { lags } : {}),
              ...(opts.seed !== undefined ? { fit: { ...entry.fit, seed: opts.seed } } : {}),
            };
            const { series, issues } = resolveAll({ ...config, series: config.series.map((e, i) => (i === seriesIndex ? changed : e)) });
            const mine = issues.filter((i) => i.segments[0] === 'series' && i.segments[1] === seriesIndex);
            const r = series.find((s) => s.index === seriesIndex);
            if (mine.length || !r) {
              const first = mine[0];
              rejected.push({
                values,
                label,
                code: first?.code ?? 'CONFIG_COMBINATION',
                message: first ? `${first.segments.slice(2).join('.')}: ${first.message}` : 'the combination does not resolve',
                hint: first?.hint ?? 'check the grid values against the series settings',
              });
            } else {
              candidates.push({ id, values, label, settings: r.settings, windowSteps: r.settings.windowSteps });
            }
            id++;
          }
        }
      }
    }
  }
  return { candidates, rejected, total: id };
}

/** One key the best combination changes in the series' entry. */
export interface TunedChange {
  key: 'window' | 'centres' | 'widthMode' | 'ridge' | 'lags';
  value: WindowSpec | number | string | LagSpec[];
  /** The series' effective value before (from its entry or from defaults), as text. */
  from: string;
}

function sameLags(a: readonly LagSpec[], b: readonly number[], stepMs: number): boolean {
  const x = expandLags(a, stepMs);
  return x.ok && x.value.length === b.length && x.value.every((v, i) => v === b[i]);
}

/**
 * The tuned keys of `best`, and the ones among them that differ from the series' effective
 * settings (`current`): only those are written by --write.
 */
export function tunedKeys(best: CandidateValues, current: ResolvedSeries, grid: TuneGrid): { all: TunedChange[]; changed: TunedChange[] } {
  const s = current.settings;
  const all: Array<TunedChange & { same: boolean }> = [];
  const bestWindow = toSteps(best.window, s.stepMs, 'window');
  all.push({ key: 'window', value: best.window, from: formatDurationMs(s.windowSteps * s.stepMs), same: bestWindow.ok && bestWindow.value === s.windowSteps });
  all.push({ key: 'centres', value: best.centres, from: String(s.fit.nCentres), same: s.fit.nCentres === best.centres });
  all.push({ key: 'widthMode', value: best.widthMode, from: String(s.fit.widthMode), same: s.fit.widthMode === best.widthMode });
  if (grid.ridges && best.ridge !== undefined) all.push({ key: 'ridge', value: best.ridge, from: String(s.fit.ridge), same: s.fit.ridge === best.ridge });
  if (grid.lagSets && best.lags) all.push({ key: 'lags', value: best.lags, from: s.features.lags.join(','), same: sameLags(best.lags, s.features.lags, s.stepMs) });
  const strip = ({ same: _same, ...c }: TunedChange & { same: boolean }): TunedChange => c;
  return { all: all.map(strip), changed: all.filter((c) => !c.same).map(strip) };
}

const PLAIN = /^[A-Za-z][A-Za-z0-9_.-]*$|^\d+(ms|s|m|h|d|w)$/;
const YAML_WORDS = new Set(['true', 'false', 'null', 'yes', 'no', 'on', 'off', 'y', 'n', '~']);

/** A value as YAML text on one line: plain scalars where safe, strings in lists double-quoted. */
export function yamlInline(v: unknown, inList = false): string {
  if (typeof v === 'number') return Number.isFinite(v) ? String(v) : JSON.stringify(String(v));
  if (typeof v === 'string') return !inList && PLAIN.test(v) && !YAML_WORDS.has(v.toLowerCase()) ? v : JSON.stringify(v);
  if (Array.isArray(v)) return `[${v.map((x) => yamlInline(x, true)).join(', ')}]`;
  return JSON.stringify(v);
}

/** The snippet to paste into the series entry: one `key: value` line per tuned key. */
export function tuneSnippet(changes: readonly TunedChange[], header?: string): string {
  const lines = header ? header.split('\n').map((l) => `# ${l}`) : [];
  for (const c of changes) lines.push(`${c.key}: ${yamlInline(c.value)}`);
  return lines.join('\n') + '\n';
}
