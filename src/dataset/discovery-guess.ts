/**
 * The guess behind early discovery (early-discovery.ts): which inputs a config file names, from its text
 * alone (parse and `${ENV}` interpolation, no schema, so no zod). Runs in the discovery worker.
 */
import { readFile, stat } from 'node:fs/promises'
import path from 'node:path'
import { interpolateEnv, parseConfigText, resolveConfigPaths } from '../config/text.js'
import { discoverOptionsOf } from '../pipeline/plan.js'
import type { DiscoveryInputs } from './early-discovery.js'

/**
 * The discovery inputs a raw (parsed, not validated) config names: `source.paths` resolved from the
 * config file's folder, `source.format` (default `auto`), and the resolved `output.root` excluded,
 * as `discoverOptionsOf` derives them from the validated config. Null when the raw config does not
 * say them plainly (missing or mistyped keys, an unset environment variable). Pure.
 */
export function discoveryGuess(
  raw: unknown,
  file: string,
  env: Readonly<Record<string, string | undefined>>,
): DiscoveryInputs | null {
  const missing: string[] = []
  const value = interpolateEnv(raw, env, missing)
  if (missing.length > 0 || !isRecord(value) || !isRecord(value.source) || !isRecord(value.output)) return null
  const { paths, format = 'auto' } = value.source
  const { root } = value.output
  if (!Array.isArray(paths) || paths.length === 0 || !paths.every((p) => typeof p === 'string' && p !== '')) return null
  if (typeof root !== 'string' || root === '') return null
  if (format !== 'auto' && format !== 'parquet' && format !== 'arrow') return null
  const resolved = resolveConfigPaths(paths as string[], root, path.dirname(file))
  return {
    inputs: resolved.paths,
    options: discoverOptionsOf({ source: { format }, output: { root: resolved.root } }),
  }
}

/**
 * Reads `file` and guesses its discovery inputs (discoveryGuess); null when it is not a regular file (a pipe
 * must be left to the run's own read), or cannot be read or parsed.
 */
export async function guessFromConfigFile(
  file: string,
  env: Readonly<Record<string, string | undefined>>,
): Promise<DiscoveryInputs | null> {
  try {
    // Only a regular file: a pipe (`--config <(envsubst < job.yaml)`, /dev/stdin) can be read once, and that
    // read belongs to the run's own config load.
    if (!(await stat(file)).isFile()) return null
    return discoveryGuess(parseConfigText(await readFile(file, 'utf8'), file), file, env)
  } catch {
    return null // the run's own config load reports the problem
  }
}

function isRecord(v: unknown): v is Record<string, unknown> {
  return typeof v === 'object' && v !== null && !Array.isArray(v)
}
