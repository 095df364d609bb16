/**
 * Finds the input files of a dataset: folders are walked recursively, files are taken as given,
 * globs (`*`, `**`, `?`) are matched below their fixed prefix. The kind of each file comes from
 * its extension, or from its magic bytes when the extension says nothing. Hive-style `name=value`
 * folder segments become columns of every row in the file.
 */
import { type Dirent, readdirSync, type Stats, statSync } from 'node:fs'
import { open } from 'node:fs/promises'
import path from 'node:path'
import { DataError, NoInputError } from '../errors.js'
import type { FileKind, SourceFile } from '../types.js'

export interface DiscoverOptions {
  /** `auto` (default) or force every file to one family. */
  readonly format?: 'auto' | 'parquet' | 'arrow'
  /** Folders never entered (e.g. the output root when it sits inside the dataset). */
  readonly exclude?: readonly string[]
}

/** What discovery found, plus the files it passed over in walked folders and why. */
export interface Discovery {
  readonly files: readonly SourceFile[]
  readonly ignored: readonly { readonly path: string; readonly reason: string }[]
}

const byExtension: Readonly<Record<string, FileKind>> = {
  '.parquet': 'parquet',
  '.parq': 'parquet',
  '.arrow': 'arrow-file',
  '.feather': 'arrow-file',
  '.ipc': 'arrow-file',
  '.arrows': 'arrow-stream',
}

/**
 * Lists the dataset's files, sorted by path. An explicitly named file that is not Parquet or Arrow
 * is an error; in walked folders such files (e.g. `_SUCCESS`, `.crc`) are skipped and reported in
 * `ignored`. Throws NoInputError when a path does not exist or nothing was found.
 *
 * Folder listings and stats are synchronous calls: a lake of 10,000 partition folders costs one
 * round trip through the thread pool per call when asynchronous (about 1 s), a tenth of that when not,
 * and a batch run has nothing else to do meanwhile.
 */
export async function discoverFiles(inputs: readonly string[], options: DiscoverOptions = {}): Promise<Discovery> {
  const found = new Map<string, SourceFile>()
  const ignored: { path: string; reason: string }[] = []
  const exclude = (options.exclude ?? []).map((p) => path.resolve(p))
  for (const input of inputs) {
    const abs = path.resolve(input)
    if (isGlob(abs)) {
      const { root, pattern } = splitGlob(abs)
      for (const { file, hive } of walk(root, exclude, noHive)) {
        if (pattern.test(file)) await addFile(file, hive, false)
      }
      continue
    }
    const st = statOrNull(abs)
    if (st === null) {
      throw new NoInputError(`input path ${abs} does not exist; fix source.paths in the config`, {
        context: { file: abs },
      })
    }
    if (st.isDirectory()) {
      for (const { file, hive } of walk(abs, exclude, noHive)) await addFile(file, hive, false)
    } else await addFile(abs, noHive, true)
  }
  const files = [...found.values()].sort((a, b) => (a.path < b.path ? -1 : a.path > b.path ? 1 : 0))
  return { files, ignored }

  async function addFile(file: string, hive: Readonly<Record<string, string>>, explicit: boolean): Promise<void> {
    if (found.has(file)) return
    const base = path.basename(file)
    if (!explicit && (base.startsWith('_') || base.startsWith('.'))) {
      ignored.push({ path: file, reason: 'hidden or marker file' })
      return
    }
    const st = statSync(file)
    const format = options.format ?? 'auto'
    // The extension settles almost every file without a promise; only the others read magic bytes.
    const kind = kindFromExtension(file, format) ?? (await detectKind(file, st.size, format))
    if (kind === null) {
      const reason = `not a Parquet or Arrow IPC file (extension ${path.extname(file) || 'none'}, no known magic bytes)`
      if (explicit) {
        throw new DataError(
          `${file} is ${reason}; list only .parquet, .arrow, .feather or .arrows files in source.paths`,
          {
            context: { file },
          },
        )
      }
      ignored.push({ path: file, reason })
      return
    }
    found.set(file, {
      path: file,
      kind,
      size: st.size,
      mtimeMs: Math.trunc(st.mtimeMs),
      hive,
    })
  }
}

/** The file kind from the extension, else from the first bytes; null when neither tells. */
export async function detectKind(
  file: string,
  size: number,
  format: 'auto' | 'parquet' | 'arrow',
): Promise<FileKind | null> {
  const fromExt = kindFromExtension(file, format)
  if (fromExt !== null) return fromExt
  if (size === 0) return null
  const head = Buffer.alloc(8)
  const fh = await open(file, 'r')
  try {
    await fh.read(head, 0, 8, 0)
  } finally {
    await fh.close()
  }
  if (head.subarray(0, 4).toString('latin1') === 'PAR1') return 'parquet'
  if (head.subarray(0, 6).toString('latin1') === 'ARROW1') return 'arrow-file'
  if (head.readUInt32LE(0) === 0xffffffff) return 'arrow-stream'
  return null
}

/** The kind a known extension gives, when it agrees with `format`; null otherwise. */
function kindFromExtension(file: string, format: 'auto' | 'parquet' | 'arrow'): FileKind | null {
  const fromExt = byExtension[path.extname(file).toLowerCase()]
  return fromExt !== undefined && (format === 'auto' || fromExt.startsWith(format)) ? fromExt : null
}

const noHive: Readonly<Record<string, string>> = Object.freeze({})

/** `name=value` folder segments between `root` and the file, outermost first. */
export function hiveSegments(file: string, root: string): Record<string, string> {
  const rel = path.relative(root, path.dirname(file))
  const out: Record<string, string> = {}
  if (rel === '' || rel.startsWith('..')) return out
  for (const seg of rel.split(path.sep)) {
    const eq = seg.indexOf('=')
    if (eq > 0) out[seg.slice(0, eq)] = decodeURIComponent(seg.slice(eq + 1))
  }
  return out
}

function isGlob(p: string): boolean {
  return /[*?[]/.test(p)
}

/** Splits `/a/b/**\/x=*\/*.parquet` into the fixed folder `/a/b` and a regex for full paths. */
export function splitGlob(abs: string): { root: string; pattern: RegExp } {
  const parts = abs.split(path.sep)
  const firstWild = parts.findIndex((p) => isGlob(p))
  const root = parts.slice(0, firstWild).join(path.sep) || path.sep
  let re = ''
  for (let i = 0; i < abs.length; i++) {
    const c = abs[i] as string
    if (c === '*') {
      if (abs[i + 1] === '*') {
        // `**/` matches zero or more folders
        re += abs[i + 2] === '/' ? '(?:.*/)?' : '.*'
        i += abs[i + 2] === '/' ? 2 : 1
      } else re += '[^/]*'
    } else if (c === '?') re += '[^/]'
    else re += c.replace(/[.+^${}()|\\]/g, '\\$&')
  }
  return { root, pattern: new RegExp(`^${re}$`) }
}

function statOrNull(file: string): Stats | null {
  try {
    return statSync(file)
  } catch {
    return null
  }
}

/**
 * Files below `dir`, each with the Hive segments of the folders between the walk's root and it (`hive`
 * holds those of `dir`; a later segment of the same name wins, as in `hiveSegments`). Folders are
 * parsed once, not once per file.
 */
function walk(
  dir: string,
  exclude: readonly string[],
  hive: Readonly<Record<string, string>>,
  out: { file: string; hive: Readonly<Record<string, string>> }[] = [],
): { file: string; hive: Readonly<Record<string, string>> }[] {
  let entries: Dirent[]
  try {
    entries = readdirSync(dir, { withFileTypes: true })
  } catch (cause) {
    throw new NoInputError(`cannot list input folder ${dir}: ${(cause as Error).message}; fix source.paths`, {
      context: { file: dir },
      cause,
    })
  }
  entries.sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0))
  const prefix = dir.endsWith(path.sep) ? dir : dir + path.sep
  for (const e of entries) {
    const p = prefix + e.name
    if (e.isDirectory()) {
      if (exclude.some((x) => p === x) || e.name.startsWith('.') || e.name.startsWith('_')) continue
      const eq = e.name.indexOf('=')
      const inner = eq > 0 ? { ...hive, [e.name.slice(0, eq)]: decodeURIComponent(e.name.slice(eq + 1)) } : hive
      walk(p, exclude, inner, out)
    } else if (e.isFile()) out.push({ file: p, hive })
  }
  return out
}
