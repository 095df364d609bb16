/**
 * Staging and atomic publish of a run's table files (design.md "Publish"; style.md 4.3: nothing is
 * half-written).
 *
 * A run writes every table file under `<root>/_state/staging/<runId>/`, mirroring the published
 * layout (`fits/…`, `shifts/…`, `runs/…`). Then, in this order:
 *
 * 1. `publish(staging, root)`: hard-links each file it will replace or remove into
 *    `<staging>/.publish/backup/`, writes and fsyncs `<staging>/.publish/manifest.json` (the list of
 *    changes, each with whether a published file existed), then renames every staged file over its
 *    target (an atomic replace per file) and removes the files listed for removal;
 * 2. `commitLedger` (store/ledger.ts): THE commit point; the ledger records `committedRunId`;
 * 3. `discardStaging(staging)`: drops the backups and the staging folder.
 *
 * Crash safety, argued step by step (`recoverStaging` runs at the start of the next run, under the
 * run lock):
 * - Is a partial result ever visible? No file is: each table file appears by one `rename` of a
 *   complete, fsynced file, so a reader sees the old or the new file, never a mix of bytes.
 * - Crash before the manifest exists: nothing in the published folders changed; recovery deletes
 *   the staging folder.
 * - Crash after the manifest, before the ledger commit: some files may already be new. Recovery
 *   rolls back: it renames each backup over its target (restoring the old bytes) and removes files
 *   that did not exist before. The published tables are exactly as the last committed run left
 *   them, and the committed ledger still describes them. Rollback is idempotent (a backup is
 *   consumed by its rename), so a crash during recovery is recovered by the next recovery.
 * - Crash after the ledger commit: every rename had completed before it (publish returns only after
 *   the renames and the folder fsyncs). Recovery sees `committedRunId` equal to the staging folder's
 *   run id and only deletes the folder (roll forward).
 * In every case the next run redoes the uncommitted work from the committed ledger and, being
 * deterministic, converges to the same tables.
 */
import { copyFile, link, open, readdir, readFile, rename, rm, rmdir, unlink } from 'node:fs/promises'
import { dirname, join, relative, sep } from 'node:path'
import { CantCreateError, DataError } from '../errors.js'
import { comparePaths } from '../plan/files.js'
import { ensureDir, fsyncDir, hasCode, stateDir } from './paths.js'

/** Name of the folder inside a staging folder that holds the manifest and backups; never published. */
export const publishDirName = '.publish'

/** One change made by `publish`, as recorded in the manifest. */
export interface PublishChange {
  /** Path relative to the output root, `/`-separated. */
  readonly path: string
  /** `put`: a staged file replaces or creates the target; `remove`: the target is deleted. */
  readonly op: 'put' | 'remove'
  /** Whether a published file existed before (then a backup exists until it is restored or discarded). */
  readonly hadPrior: boolean
}

/** What `publish` did. */
export interface PublishResult {
  /** Every change, in the order applied (sorted by path, puts before removes). */
  readonly changes: readonly PublishChange[]
}

/** What `recoverStaging` found and did. */
export interface RecoveryResult {
  /** Runs whose publish had started without a ledger commit: their changes were undone. */
  readonly rolledBack: readonly string[]
  /** Staging folders deleted without touching the published tables (no publish, or committed). */
  readonly discarded: readonly string[]
  /** Leftover `*.tmp-*` files removed from the state folder. */
  readonly tmpRemoved: readonly string[]
}

/** `<root>/_state/staging`. */
export function stagingRoot(root: string): string {
  return join(stateDir(root), 'staging')
}

/** `<root>/_state/staging/<runId>`: where run `runId` writes its table files. */
export function stagingDir(root: string, runId: string): string {
  if (runId.length === 0 || runId.includes('/') || runId.includes('\\') || runId.startsWith('.')) {
    throw new CantCreateError(
      `run id ${JSON.stringify(runId)} cannot name a staging folder; use letters, digits, - and _`,
    )
  }
  return join(stagingRoot(root), runId)
}

/** Creates (empty) the staging folder of run `runId` and returns its path. */
export async function createStaging(root: string, runId: string): Promise<string> {
  const dir = stagingDir(root, runId)
  await rm(dir, { recursive: true, force: true })
  await ensureDir(dir)
  return dir
}

/**
 * Moves every file staged under `staging` into place under `root` (creating folders), and deletes
 * the published files listed in `remove` (root-relative, `/`-separated; for example partitions
 * dropped by retention or windows left without data); listed files that do not exist are skipped,
 * and folders a removal leaves empty are removed too. Keeps backups and the manifest so `recoverStaging` can undo the changes if
 * the ledger is not committed; call `discardStaging` after `commitLedger`.
 *
 * Order and durability: backups, then the fsynced manifest, then the renames in path order, then an
 * fsync of every touched folder. It returns only when all of that is on disk, so a ledger committed
 * afterwards never describes tables that a power loss could take back.
 *
 * @throws CantCreateError when a folder, backup, manifest or rename fails; the published tables may
 *   then be partly new until `recoverStaging` rolls them back (the next run does this first).
 */
export async function publish(
  staging: string,
  root: string,
  options: { readonly remove?: readonly string[] } = {},
): Promise<PublishResult> {
  try {
    const staged = (await listFiles(staging)).filter((p) => p !== publishDirName && !p.startsWith(`${publishDirName}/`))
    const stagedSet = new Set(staged)
    const removals = [...new Set(options.remove ?? [])].filter((p) => !stagedSet.has(p)).sort(comparePaths)
    const changes: PublishChange[] = []
    for (const path of staged) changes.push({ path, op: 'put', hadPrior: await backup(root, staging, path) })
    for (const path of removals) {
      if (await backup(root, staging, path)) changes.push({ path, op: 'remove', hadPrior: true }) // else nothing to remove
    }
    await writeManifest(staging, changes)

    const touched = new Set<string>()
    for (const c of changes) {
      const target = join(root, c.path)
      if (c.op === 'put') {
        await ensureDir(dirname(target))
        await rename(join(staging, c.path), target)
      } else {
        await unlink(target).catch(ignoreMissing)
      }
      touched.add(dirname(target))
    }
    for (const c of changes) if (c.op === 'remove') await pruneEmptyDirs(root, dirname(join(root, c.path)), touched)
    for (const dir of [...touched].sort(comparePaths)) await fsyncDir(dir).catch(ignoreMissing)
    return { changes }
  } catch (cause) {
    if (cause instanceof CantCreateError) throw cause
    throw new CantCreateError(
      `cannot publish staged tables from ${staging} into ${root}; check free space and permissions, then rerun (the next run rolls back the partial publish)`,
      { context: { file: staging }, cause },
    )
  }
}

/** Deletes a staging folder with its backups; call it after the ledger commit. */
export async function discardStaging(staging: string): Promise<void> {
  await rm(staging, { recursive: true, force: true })
}

/**
 * Cleans up after runs that did not finish: for each folder under `<root>/_state/staging`, if its
 * run id equals the committed ledger's `committedRunId`, the run committed and only the folder is
 * deleted; otherwise, if a publish had started (a manifest exists), its changes are rolled back
 * from the backups, then the folder is deleted. Also removes `*.tmp-*` leftovers directly under
 * `<root>/_state` (for example an uncommitted `ledger.json.tmp-<pid>`).
 *
 * Call it at the start of a run, under the run lock (store/lock.ts), before reading the ledger's
 * tables: every staging folder then belongs to a run that is gone.
 *
 * @throws DataError when a manifest is damaged (names the file; the fix is to restore the listed
 *   tables by hand or rebuild with `run --full`).
 */
export async function recoverStaging(root: string, committedRunId: string | null): Promise<RecoveryResult> {
  const rolledBack: string[] = []
  const discarded: string[] = []
  const tmpRemoved: string[] = []
  const base = stagingRoot(root)
  for (const runId of (await readdirOrEmpty(base)).sort(comparePaths)) {
    const staging = join(base, runId)
    const changes = runId === committedRunId ? null : await readManifest(staging)
    if (changes === null) discarded.push(runId)
    else {
      await rollBack(staging, root, changes)
      rolledBack.push(runId)
    }
    await rm(staging, { recursive: true, force: true })
  }
  for (const name of (await readdirOrEmpty(stateDir(root))).sort(comparePaths)) {
    if (!/\.tmp-\d+$/.test(name)) continue
    await unlink(join(stateDir(root), name)).catch(ignoreMissing)
    tmpRemoved.push(name)
  }
  return { rolledBack, discarded, tmpRemoved }
}

async function rollBack(staging: string, root: string, changes: readonly PublishChange[]): Promise<void> {
  const touched = new Set<string>()
  for (const c of [...changes].reverse()) {
    const target = join(root, c.path)
    if (c.hadPrior) {
      try {
        await ensureDir(dirname(target))
        await rename(join(staging, publishDirName, 'backup', c.path), target)
      } catch (err) {
        if (!hasCode(err, 'ENOENT')) throw err // ENOENT: already restored by an earlier recovery
      }
    } else if (c.op === 'put') {
      await unlink(target).catch(ignoreMissing)
    }
    touched.add(dirname(target))
  }
  for (const dir of [...touched].sort(comparePaths)) await fsyncDir(dir).catch(ignoreMissing)
}

/** Links the published file at `path` into the backup folder; false when there is none. */
async function backup(root: string, staging: string, path: string): Promise<boolean> {
  const from = join(root, path)
  const to = join(staging, publishDirName, 'backup', path)
  await ensureDir(dirname(to))
  try {
    await link(from, to)
    return true
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return false
    if (hasCode(err, 'EEXIST')) return true
    if (!hasCode(err, 'EPERM', 'ENOTSUP', 'EXDEV', 'EMLINK')) throw err
  }
  await copyFile(from, to) // filesystems without hard links
  return true
}

async function writeManifest(staging: string, changes: readonly PublishChange[]): Promise<void> {
  const dir = join(staging, publishDirName)
  await ensureDir(dir)
  const file = join(dir, 'manifest.json')
  const tmp = `${file}.tmp`
  const handle = await open(tmp, 'w')
  try {
    await handle.writeFile(`${JSON.stringify({ version: 1, changes }, null, 1)}\n`, 'utf8')
    await handle.sync()
  } finally {
    await handle.close()
  }
  await rename(tmp, file)
  await fsyncDir(dir)
}

async function readManifest(staging: string): Promise<PublishChange[] | null> {
  const file = join(staging, publishDirName, 'manifest.json')
  let text: string
  try {
    text = await readFile(file, 'utf8')
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return null
    throw err
  }
  try {
    const raw: unknown = JSON.parse(text)
    if (typeof raw === 'object' && raw !== null && 'changes' in raw && Array.isArray(raw.changes)) {
      const changes: PublishChange[] = []
      for (const c of raw.changes as unknown[]) {
        if (
          typeof c === 'object' &&
          c !== null &&
          'path' in c &&
          typeof c.path === 'string' &&
          'op' in c &&
          (c.op === 'put' || c.op === 'remove') &&
          'hadPrior' in c &&
          typeof c.hadPrior === 'boolean'
        ) {
          changes.push({ path: c.path, op: c.op, hadPrior: c.hadPrior })
        } else throw new Error('bad change entry')
      }
      return changes
    }
  } catch {
    // fall through
  }
  throw new DataError(
    `publish manifest ${file} is damaged; restore the tables it lists by hand or rebuild with run --full, then delete ${staging}`,
    { context: { file } },
  )
}

/** Root-relative, `/`-separated paths of every file under `dir`, sorted. */
async function listFiles(dir: string): Promise<string[]> {
  const entries = await readdir(dir, { recursive: true, withFileTypes: true })
  const out: string[] = []
  for (const e of entries) {
    if (!e.isFile()) continue
    const parent = (e as { parentPath?: string; path?: string }).parentPath ?? (e as { path?: string }).path ?? dir
    out.push(relative(dir, join(parent, e.name)).split(sep).join('/'))
  }
  return out.sort(comparePaths)
}

/** Removes `dir` and its parents up to (not including) `root` while they are empty; notes their parents. */
async function pruneEmptyDirs(root: string, dir: string, touched: Set<string>): Promise<void> {
  for (let d = dir; d !== root && d.startsWith(root + sep); d = dirname(d)) {
    try {
      await rmdir(d)
    } catch (err) {
      if (hasCode(err, 'ENOTEMPTY', 'EEXIST', 'ENOENT')) return
      throw err
    }
    touched.delete(d)
    touched.add(dirname(d))
  }
}

async function readdirOrEmpty(dir: string): Promise<string[]> {
  try {
    return await readdir(dir)
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return []
    throw err
  }
}

function ignoreMissing(err: unknown): void {
  if (!hasCode(err, 'ENOENT')) throw err
}
