/**
 * One run at a time per output root (issue #4, lock): `<root>/_state/run.lock` names its holder.
 * A second run waits up to `waitMs`, then fails with exit 75 (EX_TEMPFAIL: retry later). A lock left
 * by a killed process is taken over safely.
 */
import { randomBytes } from 'node:crypto'
import { link, readFile, stat, unlink, utimes, writeFile } from 'node:fs/promises'
import { hostname as osHostname } from 'node:os'
import { join } from 'node:path'
import { setTimeout as sleep } from 'node:timers/promises'
import { CantCreateError, TempFailError } from '../errors.js'
import { ensureDir, hasCode, stateDir } from './paths.js'

/** Stable code of the lock-timeout error (exit 75). */
export const lockedCode = 'SLOPESHIFT_LOCKED'

/** What the lock file holds. */
export interface LockHolder {
  readonly pid: number
  readonly hostname: string
  /** ISO 8601 UTC time the holder started asking for the lock (identifies this acquisition). */
  readonly startedAt: string
  readonly runId: string
  /**
   * Start time of the holder process in kernel clock ticks since boot (Linux `/proc/<pid>/stat`
   * field 22); absent elsewhere. Tells a live holder from an unrelated process that reused its pid.
   */
  readonly procStart?: string
}

/** Options of `acquireRunLock`. */
export interface RunLockOptions {
  /** Id of the run taking the lock; written into the lock and checked on release. */
  readonly runId: string
  /** How long to wait for a live holder before giving up, ms (0: try once). */
  readonly waitMs: number
  /** Delay between attempts while waiting, ms (default 200). */
  readonly pollMs?: number
  /**
   * A lock from another host whose heartbeat (the lock file's mtime) is older than this is stale, ms.
   * Without it, a lock from another host is never taken over (its pid cannot be checked from here).
   */
  readonly staleAfterMs?: number
  /** How often the holder refreshes the lock file's mtime, ms (default 10 000; 0 turns it off). */
  readonly heartbeatMs?: number
  /** Host name to record and compare (default `os.hostname()`). */
  readonly hostname?: string
}

/** Releases the lock if it is still ours; idempotent. */
export type ReleaseLock = () => Promise<void>

/** `<root>/_state/run.lock`. */
export function runLockPath(root: string): string {
  return join(stateDir(root), 'run.lock')
}

/**
 * Takes the run lock of `root`, waiting up to `waitMs` for a live holder; returns `release`.
 *
 * Exclusive creation: the holder record is written to a private temp file and hard-linked to
 * `run.lock`. `link` fails with EEXIST when the lock exists, exactly like an O_EXCL (`wx`) create,
 * but the lock appears with its full content, so no waiter ever reads a half-written holder.
 *
 * Stale locks: a holder on this host whose pid no longer exists (`process.kill(pid, 0)` → ESRCH),
 * or, with `staleAfterMs`, a holder on another host whose heartbeat stopped. Takeover is guarded:
 * a waiter first creates `run.lock.takeover` exclusively, re-reads the lock, removes it only if it
 * is still the same stale holder, then removes the guard and competes for the lock like everyone
 * else. Only the guard holder removes a lock it does not own, and a stale lock cannot change under
 * it (nobody else removes it, nobody can create over it), so two waiters can never both take over,
 * and a live lock is never removed. A guard left by a process killed inside this microsecond step
 * is itself removed once its pid is gone (or after `staleAfterMs`).
 *
 * Pid reuse (a container restarted with the same hostname often gets the same small pids): on
 * Linux the lock also records the holder's process start time, so a live process that merely
 * reuses the pid is recognised and the lock is taken over. Elsewhere a reused pid makes the lock
 * look live; the waiter times out with a message naming the pid and the fix.
 *
 * Other hosts: their pids cannot be checked, so the holder refreshes the lock file's mtime every
 * `heartbeatMs`, and a lock whose mtime is older than `staleAfterMs` is taken over. This relies on
 * clocks agreeing within `staleAfterMs` and on the holder not stalling that long (for example a
 * suspended VM); choose it well above `heartbeatMs` (e.g. 10×).
 *
 * @throws TempFailError (`SLOPESHIFT_LOCKED`, exit 75) when a live holder keeps the lock past `waitMs`.
 * @throws CantCreateError when the state folder cannot be written.
 */
export async function acquireRunLock(root: string, options: RunLockOptions): Promise<ReleaseLock> {
  const pollMs = options.pollMs ?? 200
  const host = options.hostname ?? osHostname()
  const lockPath = runLockPath(root)
  const deadline = Date.now() + options.waitMs
  const procStart = await processStart(process.pid)
  const me: LockHolder = {
    pid: process.pid,
    hostname: host,
    startedAt: new Date().toISOString(),
    runId: options.runId,
    ...(procStart === null ? {} : { procStart }),
  }
  const tmp = `${lockPath}.${process.pid}-${randomBytes(6).toString('hex')}.tmp`
  try {
    await ensureDir(stateDir(root))
    await writeFile(tmp, `${JSON.stringify(me)}\n`, { flag: 'wx' })
  } catch (cause) {
    throw new CantCreateError(`cannot create the run lock in ${stateDir(root)}; check permissions on the output root`, {
      context: { file: lockPath },
      cause,
    })
  }
  try {
    for (;;) {
      try {
        if (await createExclusive(tmp, lockPath)) break
      } catch (cause) {
        throw new CantCreateError(`cannot create the run lock ${lockPath}; check permissions on the output root`, {
          context: { file: lockPath },
          cause,
        })
      }
      const holder = await readHolder(lockPath)
      if (holder === 'gone') continue
      if (holder !== 'unreadable' && (await isStale(lockPath, holder, host, options.staleAfterMs))) {
        if (await takeOver(lockPath, holder, host, options.staleAfterMs)) continue
      }
      if (Date.now() >= deadline) throw lockedError(root, lockPath, holder, options.waitMs)
      await sleep(Math.max(1, Math.min(pollMs, deadline - Date.now())))
    }
  } finally {
    await unlink(tmp).catch(() => undefined)
  }

  const heartbeatMs = options.heartbeatMs ?? 10_000
  const timer =
    heartbeatMs > 0
      ? setInterval(() => {
          const t = new Date()
          utimes(lockPath, t, t).catch(() => undefined)
        }, heartbeatMs)
      : undefined
  timer?.unref()
  let released = false
  return async () => {
    if (released) return
    released = true
    if (timer !== undefined) clearInterval(timer)
    const current = await readHolder(lockPath)
    if (typeof current === 'object' && sameHolder(current, me)) await unlink(lockPath).catch(() => undefined)
  }
}

/** Reads the holder recorded in a lock file: `gone` when it does not exist, `unreadable` when damaged. */
export async function readHolder(lockPath: string): Promise<LockHolder | 'gone' | 'unreadable'> {
  let text: string
  try {
    text = await readFile(lockPath, 'utf8')
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return 'gone'
    throw err
  }
  try {
    const raw: unknown = JSON.parse(text)
    if (
      typeof raw === 'object' &&
      raw !== null &&
      'pid' in raw &&
      typeof raw.pid === 'number' &&
      'hostname' in raw &&
      typeof raw.hostname === 'string' &&
      'startedAt' in raw &&
      typeof raw.startedAt === 'string' &&
      'runId' in raw &&
      typeof raw.runId === 'string'
    ) {
      const holder = { pid: raw.pid, hostname: raw.hostname, startedAt: raw.startedAt, runId: raw.runId }
      return 'procStart' in raw && typeof raw.procStart === 'string' ? { ...holder, procStart: raw.procStart } : holder
    }
  } catch {
    // fall through
  }
  return 'unreadable'
}

/** True when `pid` names a live process on this host (EPERM: alive but not ours). */
export function isPidAlive(pid: number): boolean {
  if (!Number.isInteger(pid) || pid <= 0) return false
  try {
    process.kill(pid, 0)
    return true
  } catch (err) {
    return !hasCode(err, 'ESRCH')
  }
}

async function isStale(
  path: string,
  holder: LockHolder,
  host: string,
  staleAfterMs: number | undefined,
): Promise<boolean> {
  if (holder.hostname === host) {
    if (!isPidAlive(holder.pid)) return true
    if (holder.procStart === undefined) return false
    const start = await processStart(holder.pid)
    return start !== null && start !== holder.procStart // the pid now belongs to another process
  }
  if (staleAfterMs === undefined) return false
  try {
    return Date.now() - (await stat(path)).mtimeMs > staleAfterMs
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return false
    throw err
  }
}

/**
 * Removes the stale lock `stale` under the takeover guard (see `acquireRunLock`). True when the
 * caller should retry at once (guard held, or a dead guard cleared); false when another waiter
 * holds the guard, so the caller waits a poll interval.
 */
async function takeOver(
  lockPath: string,
  stale: LockHolder,
  host: string,
  staleAfterMs: number | undefined,
): Promise<boolean> {
  const guard = `${lockPath}.takeover`
  const guardTmp = `${guard}.${process.pid}-${randomBytes(6).toString('hex')}.tmp`
  const mine: LockHolder = { pid: process.pid, hostname: host, startedAt: new Date().toISOString(), runId: 'takeover' }
  await writeFile(guardTmp, `${JSON.stringify(mine)}\n`, { flag: 'wx' })
  const created = await createExclusive(guardTmp, guard).finally(() => unlink(guardTmp).catch(() => undefined))
  if (!created) {
    // Someone else is taking over right now; if that someone died mid-step, clear its guard.
    const other = await readHolder(guard)
    if (typeof other === 'object' && (await isStale(guard, other, host, staleAfterMs))) {
      const again = await readHolder(guard)
      if (typeof again === 'object' && sameHolder(again, other)) {
        await unlink(guard).catch(() => undefined)
        return true
      }
    }
    return false
  }
  try {
    const current = await readHolder(lockPath)
    if (typeof current === 'object' && sameHolder(current, stale)) {
      await unlink(lockPath).catch((err: unknown) => {
        if (!hasCode(err, 'ENOENT')) throw err
      })
    }
  } finally {
    await unlink(guard).catch(() => undefined)
  }
  return true
}

/**
 * Creates `target` holding the bytes of `tmp`, failing if `target` exists: `link` (atomic, full
 * content at once). Filesystems without hard links fall back to an O_EXCL (`wx`) create plus write,
 * where a waiter may briefly see an empty lock (read as `unreadable`: it waits). False on EEXIST.
 */
async function createExclusive(tmp: string, target: string): Promise<boolean> {
  try {
    await link(tmp, target)
    return true
  } catch (err) {
    if (hasCode(err, 'EEXIST')) return false
    if (!hasCode(err, 'EPERM', 'ENOTSUP', 'ENOSYS', 'EOPNOTSUPP', 'EXDEV')) throw err
  }
  try {
    await writeFile(target, await readFile(tmp), { flag: 'wx' })
    return true
  } catch (err) {
    if (hasCode(err, 'EEXIST')) return false
    throw err
  }
}

/**
 * Start time of process `pid` in clock ticks since boot, from Linux `/proc/<pid>/stat` (field 22,
 * counted after the parenthesised command name, which may itself hold spaces); null elsewhere.
 */
export async function processStart(pid: number): Promise<string | null> {
  try {
    const text = await readFile(`/proc/${pid}/stat`, 'utf8')
    const fields = text.slice(text.lastIndexOf(')') + 2).split(' ')
    const start = fields[19]
    return start !== undefined && /^[0-9]+$/.test(start) ? start : null
  } catch {
    return null
  }
}

function sameHolder(a: LockHolder, b: LockHolder): boolean {
  return (
    a.pid === b.pid &&
    a.hostname === b.hostname &&
    a.startedAt === b.startedAt &&
    a.runId === b.runId &&
    a.procStart === b.procStart
  )
}

function lockedError(root: string, lockPath: string, holder: LockHolder | 'unreadable', waitMs: number): TempFailError {
  const who =
    holder === 'unreadable'
      ? 'an unreadable lock file'
      : `run ${holder.runId} (pid ${holder.pid} on ${holder.hostname}, since ${holder.startedAt})`
  return new TempFailError(
    lockedCode,
    `output root ${root} is locked by ${who}; waited ${waitMs} ms. Retry later or raise the lock wait; if that process is gone (another host, reused pid), delete ${lockPath}`,
    { context: { file: lockPath, ...(holder === 'unreadable' ? {} : { pid: holder.pid, hostname: holder.hostname }) } },
  )
}
