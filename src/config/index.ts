/** Public surface of the config layer. */
export * from './schema.ts';
export * from './errors.ts';
export * from './duration.ts';
export { resolveAll, type ResolvedSeries, type ResolvedExogenous, type ResolvedDrift } from './resolve.ts';
export { loadConfigFile, loadConfigOrThrow, parseConfigObject, parseConfigText, resolveSeries, mergeDefaults, type LoadedConfig, type LoadResult, type LoadOptions } from './load.ts';
export { Secrets, loadSecrets, type SecretDeps } from './secrets.ts';
export { createLogger, REDACT_PATHS, REDACTED, SECRET_KEYS, type LoggerOptions } from './logger.ts';
