/**
 * Loads a config file (YAML or JSON), interpolates environment references, applies CLI overrides,
 * validates against the schema and resolves relative paths from the file's folder. Every problem
 * is reported at once, each with its key path and the fix.
 */
import { readFile } from 'node:fs/promises'
import path from 'node:path'
import { z } from 'zod'
import { ConfigError } from '../errors.js'
import { type Config, configSchema } from './schema.js'
import { interpolateEnv, parseConfigText, resolveConfigPaths } from './text.js'

export { parseConfigText } from './text.js'

/** Values given on the command line, applied over the file: dotted key path → value. */
export type ConfigOverrides = Readonly<Record<string, unknown>>

export interface LoadConfigOptions {
  readonly overrides?: ConfigOverrides
  /** Environment used for `${NAME}` references (default `process.env`). */
  readonly env?: Readonly<Record<string, string | undefined>>
}

/** A loaded config plus where it came from. */
export interface LoadedConfig {
  readonly config: Config
  /** Absolute path of the config file. */
  readonly file: string
}

/** Reads, interpolates, overrides, validates and resolves a config file. Throws ConfigError. */
export async function loadConfig(file: string, options: LoadConfigOptions = {}): Promise<LoadedConfig> {
  const abs = path.resolve(file)
  let text: string
  try {
    text = await readFile(abs, 'utf8')
  } catch (cause) {
    throw new ConfigError(
      `cannot read config file ${abs}: ${(cause as Error).message}; pass an existing file to --config`,
      {
        context: { file: abs },
        cause,
      },
    )
  }
  const raw = parseConfigText(text, abs)
  return { config: resolveConfig(raw, abs, options), file: abs }
}

/**
 * Validates an already-parsed config object: interpolation, overrides, schema, path resolution.
 * `file` is used in messages and as the base for relative paths.
 */
export function resolveConfig(raw: unknown, file: string, options: LoadConfigOptions = {}): Config {
  const env = options.env ?? process.env
  const missing: string[] = []
  let value = interpolateEnv(raw, env, missing)
  if (missing.length > 0) {
    throw new ConfigError(
      `config file ${file} refers to unset environment variables:\n${missing.join('\n')}\nset them in the job's environment`,
      { context: { file } },
    )
  }
  for (const [keyPath, v] of Object.entries(options.overrides ?? {})) value = setPath(value, keyPath.split('.'), v)
  const parsed = configSchema.safeParse(value)
  if (!parsed.success) {
    throw new ConfigError(
      `config file ${file} has ${parsed.error.issues.length} problem(s):\n${z.prettifyError(parsed.error)}`,
      {
        context: { file },
      },
    )
  }
  const config = parsed.data
  const resolved = resolveConfigPaths(config.source.paths, config.output.root, path.dirname(file))
  return {
    ...config,
    source: { ...config.source, paths: resolved.paths },
    output: { ...config.output, root: resolved.root },
  }
}

function setPath(target: unknown, keys: readonly string[], v: unknown): unknown {
  const [head, ...rest] = keys
  if (head === undefined) return v
  const obj =
    target !== null && typeof target === 'object' && !Array.isArray(target) ? (target as Record<string, unknown>) : {}
  return { ...obj, [head]: setPath(obj[head], rest, v) }
}
