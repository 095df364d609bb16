/**
 * Where run state lives under the output root, and the small file-system steps every store module
 * shares (make a folder, fsync a folder, match an error code).
 */
import { mkdir, open } from 'node:fs/promises'
import { join } from 'node:path'

/** `<root>/_state`: ledger, partials, staging, lock. Never part of the published tables. */
export function stateDir(root: string): string {
  return join(root, '_state')
}

/** Creates a folder and its parents; no error when it exists. */
export async function ensureDir(dir: string): Promise<void> {
  await mkdir(dir, { recursive: true })
}

/**
 * Flushes a folder's entries (created, renamed, removed names) to disk, so a rename survives a power
 * loss. Best effort: platforms that cannot open a folder for fsync (EISDIR, EPERM, EINVAL) skip it.
 */
export async function fsyncDir(dir: string): Promise<void> {
  let handle: Awaited<ReturnType<typeof open>> | undefined
  try {
    handle = await open(dir, 'r')
    await handle.sync()
  } catch (err) {
    if (!hasCode(err, 'EISDIR', 'EPERM', 'EINVAL', 'EBADF')) throw err
  } finally {
    await handle?.close()
  }
}

/** True when `err` is a Node system error with one of `codes`. */
export function hasCode(err: unknown, ...codes: readonly string[]): boolean {
  return (
    typeof err === 'object' && err !== null && 'code' in err && typeof err.code === 'string' && codes.includes(err.code)
  )
}
