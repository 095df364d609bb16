/**
 * Crash-safe small-file writes for the notify state: write `<name>.tmp-<pid>`, fsync, rename over
 * the target, fsync the folder. A reader sees the old file or the new one, never half of either.
 */
import { mkdir, open, rename, rm } from 'node:fs/promises'
import { dirname } from 'node:path'

/** Atomically replaces `path` with `text` (UTF-8), creating parent folders. */
export async function writeFileAtomic(path: string, text: string): Promise<void> {
  await mkdir(dirname(path), { recursive: true })
  const tmp = `${path}.tmp-${process.pid}`
  try {
    const handle = await open(tmp, 'w')
    try {
      await handle.writeFile(text, 'utf8')
      await handle.sync()
    } finally {
      await handle.close()
    }
    await rename(tmp, path)
  } catch (err) {
    await rm(tmp, { force: true })
    throw err
  }
  await syncDir(dirname(path))
}

/** Renames `from` to `to` (same file system), creating the target folder, and fsyncs both folders. */
export async function moveFile(from: string, to: string): Promise<void> {
  await mkdir(dirname(to), { recursive: true })
  await rename(from, to)
  await syncDir(dirname(to))
  await syncDir(dirname(from))
}

/** fsync of a folder makes a rename durable; some platforms refuse it, which is harmless here. */
async function syncDir(dir: string): Promise<void> {
  try {
    const handle = await open(dir, 'r')
    try {
      await handle.sync()
    } finally {
      await handle.close()
    }
  } catch {
    // Not supported on this platform or file system: the rename itself is still atomic.
  }
}
