/**
 * The text-level steps of loading a config, without the schema (and so without zod): parse YAML or JSON,
 * and interpolate `${NAME}` references. config/load.ts builds on them; the discovery worker uses them to
 * start listing a job's inputs before the CLI has loaded (dataset/early-discovery.ts).
 */
import path from 'node:path'
import { parse as parseYaml, YAMLParseError } from 'yaml'
import { ConfigError } from '../errors.js'

/** Parses YAML or JSON text (JSON is valid YAML, but `.json` files get JSON's stricter errors). */
export function parseConfigText(text: string, file: string): unknown {
  try {
    return file.endsWith('.json') ? JSON.parse(text) : parseYaml(text)
  } catch (cause) {
    const where =
      cause instanceof YAMLParseError && cause.linePos
        ? ` at line ${cause.linePos[0].line}, column ${cause.linePos[0].col}`
        : ''
    throw new ConfigError(
      `config file ${file} is not valid ${file.endsWith('.json') ? 'JSON' : 'YAML'}${where}: ${(cause as Error).message.split('\n')[0]}`,
      {
        context: { file },
        cause,
      },
    )
  }
}

/**
 * `value` with `${NAME}` and `${NAME:-default}` replaced in every string from `env`; each unset name
 * without a default is added to `missing` with its key path (and replaced by an empty string).
 */
export function interpolateEnv(
  value: unknown,
  env: Readonly<Record<string, string | undefined>>,
  missing: string[],
): unknown {
  return interpolate(value, env, [], missing)
}

const envRef = /\$\{([A-Za-z_][A-Za-z0-9_]*)(?::-([^}]*))?\}/g

/** Replaces `${NAME}` and `${NAME:-default}` in every string; records unset names with their key path. */
function interpolate(
  value: unknown,
  env: Readonly<Record<string, string | undefined>>,
  at: readonly string[],
  missing: string[],
): unknown {
  if (typeof value === 'string') {
    return value.replace(envRef, (_m, name: string, fallback: string | undefined) => {
      const v = env[name]
      if (v !== undefined && v !== '') return v
      if (fallback !== undefined) return fallback
      missing.push(`✖ environment variable ${name} is not set\n  → at ${at.join('.') || '(root)'}`)
      return ''
    })
  }
  if (Array.isArray(value)) return value.map((v, i) => interpolate(v, env, [...at, String(i)], missing))
  if (value !== null && typeof value === 'object') {
    return Object.fromEntries(Object.entries(value).map(([k, v]) => [k, interpolate(v, env, [...at, k], missing)]))
  }
  return value
}

/**
 * `source.paths` and `output.root` of a config, resolved from `base` (the config file's folder) as a run uses
 * them: absolute paths stay, relative ones are taken from `base`.
 */
export function resolveConfigPaths(
  paths: readonly string[],
  root: string,
  base: string,
): { readonly paths: string[]; readonly root: string } {
  return { paths: paths.map((p) => (path.isAbsolute(p) ? p : path.resolve(base, p))), root: path.resolve(base, root) }
}
