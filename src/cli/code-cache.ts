/**
 * A V8 code cache for the CLI bundle (`dist/bundle/cli.cjs`), used by the shipped entry (launch.ts).
 *
 * Every command pays for parsing and compiling the bundle before it does any work: ~0.1 s of a 1 s no-op
 * rerun. Node 20 has no compile cache of its own (`module.enableCompileCache` came in Node 22), but
 * `vm.Script` accepts V8's `cachedData`: with it, V8 deserializes the compiled functions instead of
 * parsing the source again. The cache is written after the first successful run of each command (one
 * file per command: `--version` need not load the engines that `run` compiled) and read by the next ones.
 *
 * Safe by construction: a cache file is named after the bundle's content hash, the Node version,
 * architecture and flags, so a rebuilt bundle or another Node never finds an old file; V8 checks the
 * rest (its version, flags, source length) and rejects a cache that does not fit, in which case the
 * bundle compiles from source as without a cache and the file is written again. Files are written
 * whole and renamed into place, so concurrent runs never read half a file. A folder that cannot be
 * written (read-only install) only means no cache.
 */
import { mkdirSync, readFileSync, renameSync, rmSync, writeFileSync } from 'node:fs'
import path from 'node:path'
import type vm from 'node:vm'

/** The CLI's commands (app.ts): each gets its own cache; anything else (`--help`, `--version`) shares one. */
const commands = new Set(['run', 'check-config', 'demo', 'explain', 'notify'])

/**
 * The folder holding the cache files: `SLOPESHIFT_CODE_CACHE` when it names one, none when it is
 * `off` (or `0`/`false`), else `cache/` beside the bundle.
 */
export function codeCacheDir(env: Readonly<Record<string, string | undefined>>, bundleDir: string): string | null {
  const setting = env.SLOPESHIFT_CODE_CACHE
  if (setting === undefined || setting === '') return path.join(bundleDir, 'cache')
  if (['off', '0', 'false'].includes(setting.toLowerCase())) return null
  return path.resolve(setting)
}

/** The command a CLI argv runs (its first argument that names one), or `cli` for the rest. */
export function commandOf(argv: readonly string[]): string {
  return argv.find((a) => commands.has(a)) ?? 'cli'
}

/**
 * File name of one cache: bundle build, command, Node version, architecture, and a hash of the flags
 * Node was started with (V8 rejects a cache made under other V8 flags, e.g. `--max-old-space-size`;
 * naming them keeps runs with and without such flags from overwriting each other's file).
 */
export function codeCacheName(
  bundleId: string,
  command: string,
  runtime: { readonly version: string; readonly arch: string; readonly flags: string },
): string {
  return `${bundleId}-${command}-${runtime.version}-${runtime.arch}-${fnv1a(runtime.flags)}.v8cache`
}

/** Reads a cache file; undefined when there is none (or it cannot be read). */
export function readCodeCache(file: string): Buffer | undefined {
  try {
    return readFileSync(file)
  } catch {
    return undefined
  }
}

/**
 * Writes `script`'s code cache (every function compiled so far) to `file`: whole into a temporary
 * file, then renamed into place. Failures are ignored: the cache only saves time.
 */
export function writeCodeCache(script: vm.Script, file: string): void {
  const tmp = `${file}.tmp-${process.pid}`
  try {
    const data = script.createCachedData()
    mkdirSync(path.dirname(file), { recursive: true })
    writeFileSync(tmp, data)
    renameSync(tmp, file)
  } catch {
    try {
      rmSync(tmp, { force: true })
    } catch {
      // the folder itself is not there or not a folder: nothing was written
    }
  }
}

/** 32-bit FNV-1a of a string, as 8 hex digits (names a flag set; not a security hash). */
function fnv1a(text: string): string {
  let h = 0x811c9dc5
  for (let i = 0; i < text.length; i++) {
    h ^= text.charCodeAt(i)
    h = Math.imul(h, 0x01000193)
  }
  return (h >>> 0).toString(16).padStart(8, '0')
}
