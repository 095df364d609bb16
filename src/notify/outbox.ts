/**
 * The outbox: digests wait on disk until a webhook answers 2xx, so a crash or a flaky endpoint
 * loses nothing and a rerun re-sends nothing.
 *
 * Layout under the output root (one JSON file per notice, named `<digest id>--<webhook slug>.json`):
 * ```
 * _state/outbox/<file>               pending: written atomically before the first attempt
 * _state/outbox/sent/<file>          delivered: moved here (one rename) after a 2xx
 * _state/outbox/dead-letter/<file>   given up: moved here once older than notify.maxAgeHours
 * ```
 * `sent/` is what lets a rerun recognise a digest it already delivered; {@link pruneSent} trims it.
 * Crash safety: every state change is one atomic write or one rename. A crash between a 2xx and
 * the rename leaves the notice pending; the next run sends it again with the same `webhook-id` and
 * the same body, which the receiver can drop. So delivery is at-least-once, and effectively once
 * for a receiver that dedupes on `webhook-id` (or `Idempotency-Key`).
 */
import { createHash } from 'node:crypto'
import { readdir, readFile, rm, stat } from 'node:fs/promises'
import { join } from 'node:path'
import { z } from 'zod'
import type { Logger } from '../log.js'
import { moveFile, writeFileAtomic } from './atomic-file.js'
import type { Digest } from './digest-schema.js'
import { encodeBody, type PayloadFormat } from './payload.js'

/** A digest serialized for one webhook, as stored in the outbox. Holds no URL and no secret. */
export interface Notice {
  readonly version: 1
  /** Config name of the webhook; its URL and secret are looked up at send time. */
  readonly webhook: string
  /** Digest id: `webhook-id` of every attempt. */
  readonly id: string
  readonly runId: string
  readonly format: PayloadFormat
  readonly contentType: string
  /** Exact body sent on every attempt (built once, so redeliveries are byte-identical). */
  readonly body: string
  /** When the notice was queued, epoch ms (dead-letter age counts from here). */
  readonly createdAtMs: number
}

/** A notice read back from the outbox, with its file path. */
export interface StoredNotice extends Notice {
  readonly file: string
}

const noticeSchema = z
  .object({
    version: z.literal(1),
    webhook: z.string().min(1),
    id: z.string().min(1),
    runId: z.string(),
    format: z.enum(['text', 'cloudevents']),
    contentType: z.string().min(1),
    body: z.string(),
    createdAtMs: z.number().finite(),
  })
  .strict()

/** Folder of pending notices: `<root>/_state/outbox`. */
export function outboxDir(root: string): string {
  return join(root, '_state', 'outbox')
}

/** Folder of delivered notices. */
export function sentDir(root: string): string {
  return join(outboxDir(root), 'sent')
}

/** Folder of notices given up on (one file per notice, so the move stays a single rename). */
export function deadLetterDir(root: string): string {
  return join(outboxDir(root), 'dead-letter')
}

/** Serializes `digest` for one webhook; `nowMs` stamps the CloudEvents `time` and `createdAtMs`. */
export function createNotice(digest: Digest, webhook: string, format: PayloadFormat, nowMs: number): Notice {
  const { body, contentType } = encodeBody(digest, format, nowMs)
  return { version: 1, webhook, id: digest.id, runId: digest.runId, format, contentType, body, createdAtMs: nowMs }
}

/** File name of a notice: digest id plus a slug of the webhook name (safe characters + short hash). */
export function noticeFileName(notice: Pick<Notice, 'id' | 'webhook'>): string {
  const slug = notice.webhook.replace(/[^A-Za-z0-9_-]/g, '_').slice(0, 40)
  const hash = createHash('sha256').update(notice.webhook).digest('hex').slice(0, 8)
  return `${notice.id}--${slug}-${hash}.json`
}

/** Outcome of {@link enqueue}. */
export type EnqueueResult =
  | { readonly kind: 'queued'; readonly file: string }
  | { readonly kind: 'duplicate'; readonly where: 'pending' | 'sent' | 'dead-letter'; readonly file: string }

/**
 * Writes a notice to the outbox atomically, unless the same (digest id, webhook) is already
 * pending, sent or dead-lettered — so a rerun that rebuilds the same digest queues nothing.
 */
export async function enqueue(root: string, notice: Notice): Promise<EnqueueResult> {
  const name = noticeFileName(notice)
  const places = [
    ['pending', join(outboxDir(root), name)],
    ['sent', join(sentDir(root), name)],
    ['dead-letter', join(deadLetterDir(root), name)],
  ] as const
  for (const [where, file] of places) {
    if (await exists(file)) return { kind: 'duplicate', where, file }
  }
  const file = places[0][1]
  await writeFileAtomic(file, `${JSON.stringify(notice)}\n`)
  return { kind: 'queued', file }
}

/**
 * Lists pending notices, oldest first (then by file name). A file that cannot be parsed (not
 * written by this version, or edited by hand) is moved to the dead-letter folder with a warning,
 * so one bad file never blocks the others. Leftover `.tmp-*` files of a crashed write are ignored.
 */
export async function pending(root: string, deps: { readonly log: Logger }): Promise<StoredNotice[]> {
  const dir = outboxDir(root)
  let names: string[]
  try {
    names = await readdir(dir)
  } catch (err) {
    if (isNotFound(err)) return []
    throw err
  }
  const out: StoredNotice[] = []
  for (const name of names.sort()) {
    if (!name.endsWith('.json')) continue
    const file = join(dir, name)
    const parsed = noticeSchema.safeParse(parseJson(await readFile(file, 'utf8')))
    if (!parsed.success) {
      await moveFile(file, join(deadLetterDir(root), name))
      deps.log.warn({ file: name }, 'unreadable notice moved to dead letters')
      continue
    }
    out.push({ ...parsed.data, file })
  }
  return out.sort((a, b) => a.createdAtMs - b.createdAtMs || (a.file < b.file ? -1 : a.file > b.file ? 1 : 0))
}

/** Marks a notice delivered by moving its file to `sent/`. Idempotent: a notice already moved is left alone. */
export async function markSent(root: string, notice: Pick<Notice, 'id' | 'webhook'>): Promise<void> {
  const name = noticeFileName(notice)
  try {
    await moveFile(join(outboxDir(root), name), join(sentDir(root), name))
  } catch (err) {
    if (isNotFound(err) && (await exists(join(sentDir(root), name)))) return
    throw err
  }
}

/**
 * Moves pending notices older than `maxAgeHours` (by `createdAtMs`) to the dead-letter folder with
 * a warning naming the webhook and digest id. Returns the notices moved.
 */
export async function moveExpiredToDeadLetter(
  root: string,
  nowMs: number,
  maxAgeHours: number,
  deps: { readonly log: Logger },
): Promise<StoredNotice[]> {
  const maxAgeMs = maxAgeHours * 3_600_000
  const moved: StoredNotice[] = []
  for (const notice of await pending(root, deps)) {
    const ageMs = nowMs - notice.createdAtMs
    if (ageMs <= maxAgeMs) continue
    const name = noticeFileName(notice)
    await moveFile(notice.file, join(deadLetterDir(root), name))
    deps.log.warn(
      { webhook: notice.webhook, id: notice.id, runId: notice.runId, ageHours: Math.round(ageMs / 360_000) / 10 },
      'undelivered notice moved to dead letters',
    )
    moved.push({ ...notice, file: join(deadLetterDir(root), name) })
  }
  return moved
}

/**
 * Deletes delivered notices queued more than `keepHours` ago from `sent/`, so the folder does not
 * grow without bound. Cooldown state still stops a shift from being notified twice; what pruning
 * gives up is only the outbox's own duplicate check for digests older than `keepHours` (a rerun of
 * such an old run could send its all-clear again). Returns how many files were removed.
 */
export async function pruneSent(root: string, nowMs: number, keepHours: number): Promise<number> {
  let names: string[]
  try {
    names = await readdir(sentDir(root))
  } catch (err) {
    if (isNotFound(err)) return 0
    throw err
  }
  let removed = 0
  for (const name of names.sort()) {
    if (!name.endsWith('.json')) continue
    const file = join(sentDir(root), name)
    const parsed = noticeSchema.safeParse(parseJson(await readFile(file, 'utf8')))
    if (parsed.success && nowMs - parsed.data.createdAtMs <= keepHours * 3_600_000) continue
    await rm(file, { force: true })
    removed += 1
  }
  return removed
}

async function exists(path: string): Promise<boolean> {
  try {
    await stat(path)
    return true
  } catch (err) {
    if (isNotFound(err)) return false
    throw err
  }
}

function parseJson(text: string): unknown {
  try {
    return JSON.parse(text)
  } catch {
    return undefined
  }
}

function isNotFound(err: unknown): boolean {
  return err instanceof Error && (err as Error & { code?: unknown }).code === 'ENOENT'
}
