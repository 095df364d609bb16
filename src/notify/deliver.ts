/**
 * Webhook delivery: one POST per attempt with Node's built-in fetch and a per-attempt timeout,
 * retried with exponential backoff and full jitter on network errors, timeouts, 408, 429 and 5xx.
 *
 * Why retrying a POST is safe here: every attempt carries the same `webhook-id` / `Idempotency-Key`
 * (the content-derived digest id) and the same body, so a receiver that saw an earlier attempt
 * (say, the response was lost) can drop the repeat. Delivery is at-least-once; with the key it is
 * effectively once. Other 4xx and 3xx are not retried: repeating an identical request cannot fix
 * them. Clock, sleep, randomness and fetch are injectable so tests can assert requested delays.
 */
import { setTimeout as sleepTimer } from 'node:timers/promises'
import type { Logger } from '../log.js'
import { webhookHeaders } from './sign.js'

/** One delivery: the serialized body and where it goes. Never logged whole (URL and key are secret). */
export interface DeliveryRequest {
  /** Config name of the webhook: the only target label that appears in logs. */
  readonly webhook: string
  /** Target URL (may embed a token: treated as secret). */
  readonly url: string
  /** Digest id: `webhook-id` and `Idempotency-Key`. */
  readonly id: string
  /** Exact body text; signed and sent byte-for-byte. */
  readonly body: string
  readonly contentType: string
  /** HMAC key from `parseWebhookSecret`, or null to send unsigned. */
  readonly key: Buffer | null
}

/** Retry and timeout settings (config `notify.webhooks[]`); all times in milliseconds. */
export interface RetryPolicy {
  /** Per attempt, covering connect, response headers and body. */
  readonly timeoutMs: number
  /** Attempts in total, including the first (≥ 1). */
  readonly maxAttempts: number
  /** Backoff cap of the first retry; doubles per retry (full jitter draws from [0, cap)). */
  readonly minBackoffMs: number
  /** Upper bound of any backoff cap; a `Retry-After` longer than this ends the run's attempts. */
  readonly maxBackoffMs: number
}

/** Defaults as in the config schema: 10 s timeout, 5 attempts, 500 ms doubling to 30 s. */
export const defaultRetryPolicy: RetryPolicy = {
  timeoutMs: 10_000,
  maxAttempts: 5,
  minBackoffMs: 500,
  maxBackoffMs: 30_000,
}

/** Injected effects. Defaults: global fetch, timer sleep, Math.random, Date.now. */
export interface DeliverDeps {
  readonly log: Logger
  readonly fetch?: typeof fetch
  /** Waits `ms`; should reject or resolve early when `signal` aborts. */
  readonly sleep?: (ms: number, signal?: AbortSignal) => Promise<void>
  /** Uniform in [0, 1). */
  readonly random?: () => number
  /** Epoch ms; used for `webhook-timestamp` and HTTP-date `Retry-After`. */
  readonly now?: () => number
  /** Aborts the delivery (SIGTERM): the current attempt is cancelled and no retry follows. */
  readonly signal?: AbortSignal
}

/** How a delivery ended. */
export type DeliveryResult =
  | { readonly kind: 'delivered'; readonly attempts: number; readonly status: number }
  | {
      readonly kind: 'rejected'
      readonly status: number
      readonly attempts: number
      /** What to check, in words. */
      readonly hint: string
      /** Start of the response body (≤ 200 chars), often the receiver's reason. */
      readonly detail: string
    }
  | { readonly kind: 'failed'; readonly attempts: number; readonly lastError: string; readonly status: number | null }

/**
 * POSTs the request until a 2xx, a non-retryable answer, `maxAttempts`, or an abort. Between
 * attempts it sleeps a full-jitter backoff, `random() · min(maxBackoffMs, minBackoffMs · 2^(retry−1))`,
 * or exactly the `Retry-After` of a 429/503/408 (seconds or HTTP date). A `Retry-After` beyond
 * `maxBackoffMs` stops this delivery as `failed` (the outbox retries next run) rather than hold a
 * batch job for minutes. Redirects are not followed (the signature and URL token must not leak to
 * another host): a 3xx is `rejected` with a hint to configure the final URL.
 */
export async function deliver(
  request: DeliveryRequest,
  policy: RetryPolicy,
  deps: DeliverDeps,
): Promise<DeliveryResult> {
  const doFetch = deps.fetch ?? fetch
  const sleep = deps.sleep ?? defaultSleep
  const random = deps.random ?? Math.random
  const now = deps.now ?? Date.now
  const log = deps.log
  const base = { webhook: request.webhook, id: request.id }
  const maxAttempts = Math.max(1, Math.floor(policy.maxAttempts))
  let lastError = 'no attempt made'
  let lastStatus: number | null = null
  const isStopped = (): boolean => deps.signal?.aborted === true

  for (let attempt = 1; attempt <= maxAttempts; attempt++) {
    if (isStopped()) return stopped(attempt - 1, lastStatus, log, base)
    const outcome = await attemptOnce(request, policy, doFetch, now, deps.signal)
    if (outcome.kind === 'response') {
      const { status } = outcome
      lastStatus = status
      if (status >= 200 && status < 300) {
        log.info({ ...base, attempts: attempt, status }, 'webhook delivered')
        return { kind: 'delivered', attempts: attempt, status }
      }
      if (!isRetryableStatus(status)) {
        const hint = hintForStatus(status)
        log.error({ ...base, attempts: attempt, status, hint, detail: outcome.detail }, 'webhook rejected delivery')
        return { kind: 'rejected', status, attempts: attempt, hint, detail: outcome.detail }
      }
      lastError = `HTTP ${status}`
    } else {
      if (isStopped()) return stopped(attempt, lastStatus, log, base)
      lastStatus = null
      lastError = redact(outcome.message, request.url)
    }
    if (attempt === maxAttempts) break

    let delayMs = backoffDelayMs(attempt, policy, random)
    const retryAfter = outcome.kind === 'response' ? outcome.retryAfter : null
    if (retryAfter !== null) {
      const retryAfterMs = parseRetryAfter(retryAfter, now())
      if (retryAfterMs !== null) {
        if (retryAfterMs > policy.maxBackoffMs) {
          lastError = `${lastError}; Retry-After ${Math.ceil(retryAfterMs / 1000)} s exceeds maxBackoffMs ${policy.maxBackoffMs}, left for the next run`
          log.warn({ ...base, attempt, status: lastStatus, retryAfterMs }, 'webhook asked for a long wait')
          return failed(attempt, lastError, lastStatus, log, base)
        }
        delayMs = retryAfterMs
      }
    }
    log.warn({ ...base, attempt, status: lastStatus, error: lastError, delayMs }, 'webhook attempt failed')
    try {
      await sleep(delayMs, deps.signal)
    } catch {
      return stopped(attempt, lastStatus, log, base)
    }
  }
  return failed(maxAttempts, lastError, lastStatus, log, base)
}

/** True for statuses worth retrying unchanged: 408, 429 and every 5xx. */
export function isRetryableStatus(status: number): boolean {
  return status === 408 || status === 429 || (status >= 500 && status <= 599)
}

/**
 * Full-jitter backoff before retry number `retry` (1 = after the first attempt):
 * `random() · min(maxBackoffMs, minBackoffMs · 2^(retry−1))`, floored to whole ms.
 */
export function backoffDelayMs(retry: number, policy: RetryPolicy, random: () => number): number {
  const cap = Math.min(policy.maxBackoffMs, policy.minBackoffMs * 2 ** Math.max(0, retry - 1))
  return Math.floor(random() * cap)
}

/**
 * Parses a `Retry-After` header (RFC 9110 §10.2.3): delay-seconds (`120`) or an HTTP date
 * (`Wed, 21 Oct 2026 07:28:00 GMT`). Returns milliseconds from `nowMs` (0 for a past date), or null
 * when the value is neither.
 */
export function parseRetryAfter(value: string, nowMs: number): number | null {
  const text = value.trim()
  if (/^[0-9]+$/.test(text)) return Number(text) * 1000
  if (!/[a-z]/i.test(text)) return null
  const at = Date.parse(text)
  if (Number.isNaN(at)) return null
  return Math.max(0, at - nowMs)
}

/** A short hint for a status that is not retried. */
export function hintForStatus(status: number): string {
  if (status >= 300 && status < 400)
    return 'the endpoint redirected; configure the final URL (redirects are not followed)'
  if (status === 400 || status === 415 || status === 422) {
    return 'the endpoint did not accept the payload; check that the webhook format (text or cloudevents) is what it expects'
  }
  if (status === 401 || status === 403)
    return 'the endpoint refused the credentials; check the URL token and the secret'
  if (status === 404 || status === 410) return 'the endpoint does not know this URL; check the webhook url'
  if (status === 413) return 'the payload is too large for the endpoint; lower topN'
  return 'the endpoint refused the request; repeating it unchanged will not help, check the receiver'
}

type AttemptOutcome =
  | { readonly kind: 'response'; readonly status: number; readonly retryAfter: string | null; readonly detail: string }
  | { readonly kind: 'error'; readonly message: string }

async function attemptOnce(
  request: DeliveryRequest,
  policy: RetryPolicy,
  doFetch: typeof fetch,
  now: () => number,
  outer: AbortSignal | undefined,
): Promise<AttemptOutcome> {
  const timeout = AbortSignal.timeout(policy.timeoutMs)
  const signal = outer === undefined ? timeout : AbortSignal.any([timeout, outer])
  const headers = {
    'content-type': request.contentType,
    'user-agent': 'slopeshift',
    ...webhookHeaders({ id: request.id, timestampSeconds: Math.floor(now() / 1000), body: request.body }, request.key),
  }
  try {
    const res = await doFetch(request.url, { method: 'POST', headers, body: request.body, redirect: 'manual', signal })
    // Read the body inside the timeout: it frees the connection and may explain a rejection.
    const text = await res.text()
    return {
      kind: 'response',
      status: res.status,
      retryAfter: res.headers.get('retry-after'),
      detail: text.slice(0, 200),
    }
  } catch (err) {
    if (timeout.aborted) return { kind: 'error', message: `timed out after ${policy.timeoutMs} ms` }
    return { kind: 'error', message: describeError(err) }
  }
}

function describeError(err: unknown): string {
  if (!(err instanceof Error)) return String(err)
  const cause = err.cause
  if (cause instanceof Error) {
    const code = (cause as Error & { code?: unknown }).code
    return typeof code === 'string' ? `${err.message}: ${code} (${cause.message})` : `${err.message}: ${cause.message}`
  }
  return err.message
}

function redact(message: string, url: string): string {
  return url.length > 0 ? message.split(url).join('[redacted url]') : message
}

function failed(
  attempts: number,
  lastError: string,
  status: number | null,
  log: Logger,
  base: Readonly<Record<string, string>>,
): DeliveryResult {
  log.error({ ...base, attempts, status, error: lastError }, 'webhook delivery failed')
  return { kind: 'failed', attempts, lastError, status }
}

function stopped(
  attempts: number,
  status: number | null,
  log: Logger,
  base: Readonly<Record<string, string>>,
): DeliveryResult {
  return failed(attempts, 'stopped by signal before delivery finished', status, log, base)
}

async function defaultSleep(ms: number, signal?: AbortSignal): Promise<void> {
  await sleepTimer(ms, undefined, signal === undefined ? undefined : { signal })
}
