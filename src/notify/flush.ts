/**
 * Step 2 of delivery: send what waits in the outbox. Expired notices go to dead letters first; each
 * remaining notice is delivered to the webhook it names (URL and secret from the current config,
 * never from disk) and moved to `sent/` after a 2xx. Anything else stays pending for the next run.
 */
import type { WebhookConfig } from '../config/schema.js'
import { TempFailError } from '../errors.js'
import { type DeliverDeps, type DeliveryResult, deliver } from './deliver.js'
import { markSent, moveExpiredToDeadLetter, pending, type StoredNotice } from './outbox.js'
import { parseWebhookSecret } from './sign.js'

/** What {@link flushOutbox} needs from the config. */
export interface FlushConfig {
  readonly webhooks: readonly WebhookConfig[]
  /** Config `notify.maxAgeHours`. */
  readonly maxAgeHours: number
}

/** The outcome of one notice in a flush. */
export interface FlushedNotice {
  readonly webhook: string
  readonly id: string
  /** null when the notice was not attempted (unknown webhook, or its webhook already failed this flush). */
  readonly result: DeliveryResult | null
}

/** Counts of a flush; `pending` is what remains in the outbox afterwards. */
export interface FlushSummary {
  readonly sent: number
  readonly rejected: number
  readonly failed: number
  readonly skipped: number
  readonly pending: number
  readonly deadLettered: number
  readonly notices: readonly FlushedNotice[]
}

/**
 * Delivers pending notices, oldest first. After a `failed` delivery the webhook's remaining notices
 * are skipped until the next run (the endpoint is down; waiting out every backoff again would only
 * hold the job). Secrets are parsed before anything is sent, so a malformed secret is a ConfigError
 * up front. `deps.now` (default Date.now) also decides expiry.
 */
export async function flushOutbox(root: string, config: FlushConfig, deps: DeliverDeps): Promise<FlushSummary> {
  const now = deps.now ?? Date.now
  const keys = new Map<string, Buffer | null>()
  for (const w of config.webhooks)
    keys.set(w.name, w.secret === undefined ? null : parseWebhookSecret(w.secret, w.name))

  const dead = await moveExpiredToDeadLetter(root, now(), config.maxAgeHours, deps)
  const queue = await pending(root, deps)
  const down = new Set<string>()
  const notices: FlushedNotice[] = []
  let sent = 0
  let rejected = 0
  let failed = 0
  let skipped = 0
  for (const notice of queue) {
    const webhook = config.webhooks.find((w) => w.name === notice.webhook)
    if (webhook === undefined || down.has(notice.webhook) || deps.signal?.aborted === true) {
      if (webhook === undefined) {
        deps.log.warn({ webhook: notice.webhook, id: notice.id }, 'notice for unconfigured webhook left pending')
      }
      skipped += 1
      notices.push({ webhook: notice.webhook, id: notice.id, result: null })
      continue
    }
    const result = await sendOne(notice, webhook, keys.get(webhook.name) ?? null, deps)
    notices.push({ webhook: notice.webhook, id: notice.id, result })
    if (result.kind === 'delivered') {
      await markSent(root, notice)
      sent += 1
    } else if (result.kind === 'rejected') {
      rejected += 1
    } else {
      failed += 1
      down.add(notice.webhook)
    }
  }
  const counts = { sent, rejected, failed, skipped, pending: queue.length - sent, deadLettered: dead.length }
  deps.log.info(counts, 'outbox flushed')
  return { ...counts, notices }
}

/**
 * The error the CLI should end with after a flush (exit 75, `EX_TEMPFAIL`: results are committed,
 * rerun later to deliver), or null when nothing failed. Names webhooks, never URLs.
 */
export function undeliveredError(summary: FlushSummary): TempFailError | null {
  const bad = summary.notices.filter((n) => n.result !== null && n.result.kind !== 'delivered')
  if (bad.length === 0) return null
  const names = [...new Set(bad.map((n) => n.webhook))].sort()
  return new TempFailError(
    'SLOPESHIFT_WEBHOOK_UNDELIVERED',
    `${bad.length} digest(s) not delivered to webhook(s) ${names.join(', ')}; results are committed and the digests stay in the outbox, rerun later to deliver`,
    { context: { webhooks: names } },
  )
}

function sendOne(
  notice: StoredNotice,
  webhook: WebhookConfig,
  key: Buffer | null,
  deps: DeliverDeps,
): Promise<DeliveryResult> {
  return deliver(
    { webhook: webhook.name, url: webhook.url, id: notice.id, body: notice.body, contentType: notice.contentType, key },
    {
      timeoutMs: webhook.timeoutMs,
      maxAttempts: webhook.maxAttempts,
      minBackoffMs: webhook.minBackoffMs,
      maxBackoffMs: webhook.maxBackoffMs,
    },
    deps,
  )
}
