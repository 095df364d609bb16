/**
 * Atomic file publication for the table folders (design.md "Publish", style.md 4.3 "Nothing is half-written").
 *
 * Three layers, each crash-safe on its own:
 * 1. One file: write `<name>.tmp-<pid>` in the destination folder, fsync it, `rename` it over `<name>`, fsync the
 *    folder. Readers glob `*.parquet`, so a temp is never read, and `rename` within one folder is atomic on POSIX: a
 *    reader sees the old file or the new one, never a mix.
 * 2. One write call (writeTable, replacePartitions): every partition file of the call is first written to its temp;
 *    only when all temps are complete are they renamed, so a failure while writing leaves the table as it was.
 * 3. One run: the writers take a `stagingDir`, which receives the files under their final names instead of the table
 *    folder; after all tables of the run are staged, {@link publishStaged} renames every staged file into its table
 *    folder, and only then does the run commit its ledger. A crash before the ledger commit makes the next run redo
 *    the same work; because the files are deterministic, files that were already renamed get replaced by identical
 *    ones, and calling publishStaged again on the same staging folder finishes an interrupted publication.
 */
import { mkdir, open, readdir, rename, rm, rmdir } from 'node:fs/promises'
import { join, relative } from 'node:path'
import { CantCreateError, IoError } from '../errors.js'

/** Suffix of temp files: `<name>.tmp-<pid>`; `.gitignore` and every reader glob (`*.parquet`) skip them. */
const tempMarker = '.tmp-'

/** Temp name of `path` for this process: `<path>.tmp-<pid>`, in the same folder so the final rename is atomic. */
export function tempPathFor(path: string): string {
  return `${path}${tempMarker}${process.pid}`
}

/** Flushes a file's data to stable storage (fsync), so a rename never exposes a name whose data is still in cache. */
export async function syncFile(path: string): Promise<void> {
  const handle = await open(path, 'r')
  try {
    await handle.sync()
  } finally {
    await handle.close()
  }
}

/**
 * Flushes a folder's entries (fsync on the directory), so a completed rename survives a power loss. File systems that
 * refuse fsync on a directory (EINVAL, EISDIR, EPERM on some platforms) are tolerated: there is nothing more to do.
 */
export async function syncDir(path: string): Promise<void> {
  let handle: Awaited<ReturnType<typeof open>> | undefined
  try {
    handle = await open(path, 'r')
    await handle.sync()
  } catch (err) {
    if (!isErrno(err, ['EINVAL', 'EISDIR', 'EPERM', 'EBADF'])) throw err
  } finally {
    await handle?.close()
  }
}

/** Creates `dir` and its parents; a failure becomes a CantCreateError (exit 73) naming the folder. */
export async function makeDir(dir: string): Promise<void> {
  try {
    await mkdir(dir, { recursive: true })
  } catch (err) {
    throw new CantCreateError(
      `cannot create folder ${dir} (${errnoCode(err)}); check that output.root is a writable folder and that no file ` +
        'stands where a folder is needed',
      { context: { file: dir }, cause: err },
    )
  }
}

/** One file waiting to be renamed from its temp name to its final name. */
export interface PendingFile {
  readonly tempPath: string
  readonly finalPath: string
}

/**
 * Renames every pending file to its final name, in the given order, then fsyncs each folder touched. On a failure an
 * IoError (exit 74) names the file; files renamed before it stay published (each is complete), and the files not yet
 * renamed are deleted when `removeRestOnFailure` (temps of a writer) or kept (staged files, for a retry).
 */
export async function renameAll(files: readonly PendingFile[], removeRestOnFailure: boolean): Promise<void> {
  const dirs = new Set<string>()
  for (const [index, file] of files.entries()) {
    try {
      await rename(file.tempPath, file.finalPath)
    } catch (err) {
      if (removeRestOnFailure) await removeQuietly(files.slice(index).map((f) => f.tempPath))
      throw new IoError(
        `cannot rename ${file.tempPath} to ${file.finalPath} (${errnoCode(err)}); the staging and table folders ` +
          'must be on one file system and the final name must not be a folder',
        { context: { file: file.finalPath }, cause: err },
      )
    }
    dirs.add(join(file.finalPath, '..'))
  }
  for (const dir of [...dirs].sort()) await syncDir(dir)
}

/** Deletes the given files, ignoring any error (used to clean up temps after a failure). */
export async function removeQuietly(paths: readonly string[]): Promise<void> {
  await Promise.all(paths.map((path) => rm(path, { force: true }).catch(() => undefined)))
}

/**
 * Moves every staged `*.parquet` file from `stagingDir` into the same relative place under `targetDir` (e.g.
 * `<staging>/window_date=2026-03-01/part-0.parquet` → `<target>/window_date=2026-03-01/part-0.parquet`), replacing
 * what is there, in sorted path order; then fsyncs the touched folders and removes the emptied staging folders.
 *
 * Idempotent: after a crash half-way, calling it again moves the files that are still staged. Temp files in the
 * staging folder (an interrupted writer) are not published. Both folders must be on one file system (rename).
 *
 * @returns the published paths relative to `targetDir`, sorted, with `/` separators; empty when nothing was staged.
 */
export async function publishStaged(stagingDir: string, targetDir: string): Promise<readonly string[]> {
  const staged = (await listFiles(stagingDir)).filter((path) => path.endsWith('.parquet')).sort()
  const pending: PendingFile[] = []
  for (const rel of staged) {
    const finalPath = join(targetDir, rel)
    await makeDir(join(finalPath, '..'))
    pending.push({ tempPath: join(stagingDir, rel), finalPath })
  }
  if (pending.length > 0) {
    await renameAll(pending, false)
    await syncDir(targetDir)
  }
  await removeEmptyDirs(stagingDir)
  return staged.map((rel) => rel.split('\\').join('/'))
}

/**
 * Deletes temp files (`*.tmp-<pid>`) under `dir` left by processes that no longer run, e.g. after a crash. Temps of
 * live processes (a concurrent writer, or this one) are kept. Returns the deleted paths, sorted.
 */
export async function removeStaleTemps(dir: string): Promise<readonly string[]> {
  const stale = (await listFiles(dir))
    .filter((rel) => {
      const at = rel.lastIndexOf(tempMarker)
      if (at < 0) return false
      const pid = Number(rel.slice(at + tempMarker.length))
      return Number.isSafeInteger(pid) && pid > 0 && !isProcessAlive(pid)
    })
    .sort()
    .map((rel) => join(dir, rel))
  await removeQuietly(stale)
  return stale
}

/** Files under `dir` (recursive), relative to it; empty when `dir` does not exist. */
async function listFiles(dir: string): Promise<string[]> {
  try {
    const entries = await readdir(dir, { recursive: true, withFileTypes: true })
    return entries.filter((e) => e.isFile()).map((e) => relative(dir, join(e.parentPath, e.name)))
  } catch (err) {
    if (isErrno(err, ['ENOENT'])) return []
    throw new IoError(`cannot list folder ${dir} (${errnoCode(err)}); check that it is a readable folder`, {
      context: { file: dir },
      cause: err,
    })
  }
}

/** Removes empty folders under and including `dir`, deepest first; non-empty ones stay. */
async function removeEmptyDirs(dir: string): Promise<void> {
  let entries: string[]
  try {
    entries = (await readdir(dir, { recursive: true, withFileTypes: true }))
      .filter((e) => e.isDirectory())
      .map((e) => join(e.parentPath, e.name))
  } catch (err) {
    if (isErrno(err, ['ENOENT'])) return
    throw err
  }
  entries.sort((a, b) => b.length - a.length)
  for (const path of [...entries, dir]) await rmdir(path).catch(() => undefined)
}

function isProcessAlive(pid: number): boolean {
  try {
    process.kill(pid, 0)
    return true
  } catch (err) {
    return isErrno(err, ['EPERM'])
  }
}

/** Whether `err` is a Node system error with one of the given `code`s. */
export function isErrno(err: unknown, codes: readonly string[]): boolean {
  return err instanceof Error && 'code' in err && typeof err.code === 'string' && codes.includes(err.code)
}

/**
 * The `code` of a Node system error (`EACCES`), else the first line of the error message (DuckDB messages run over
 * several lines), for use inside our messages.
 */
export function errnoCode(err: unknown): string {
  if (err instanceof Error && 'code' in err && typeof err.code === 'string') return err.code
  const text = err instanceof Error ? err.message : String(err)
  return text.split('\n', 1)[0] ?? text
}
