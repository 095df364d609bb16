/**
 * Webhook signatures per the open Standard Webhooks specification: HMAC-SHA256 over
 * `${webhook-id}.${webhook-timestamp}.${body}`, sent as `webhook-signature: v1,<base64>`, so a
 * receiver can use any off-the-shelf Standard Webhooks verifier. See the README recipe (README.md, "Verifying a request").
 */
import { createHmac, timingSafeEqual } from 'node:crypto'
import { ConfigError } from '../errors.js'

/** Prefix of a Standard Webhooks secret: `whsec_` followed by the base64 key. */
export const secretPrefix = 'whsec_'

/** Standard Webhooks recommends rejecting timestamps more than 5 minutes from now (replay window). */
export const defaultToleranceSeconds = 300

const base64Pattern = /^(?:[A-Za-z0-9+/]{4})*(?:[A-Za-z0-9+/]{2}==|[A-Za-z0-9+/]{3}=)?$/

/**
 * Turns a configured secret into HMAC key bytes. `whsec_<base64>` (the Standard Webhooks form) is
 * base64-decoded after the prefix; any other string is used as-is, its UTF-8 bytes being the key
 * (a receiver then verifies with `whsec_` + base64 of those bytes). Throws a ConfigError naming the
 * webhook, never the secret, when the `whsec_` part is not valid base64 or empty.
 */
export function parseWebhookSecret(secret: string, webhook = 'webhook'): Buffer {
  if (!secret.startsWith(secretPrefix)) {
    if (secret.length === 0) {
      throw new ConfigError(`secret of webhook "${webhook}" is empty; set the environment variable it refers to`, {
        context: { webhook },
      })
    }
    return Buffer.from(secret, 'utf8')
  }
  const encoded = secret.slice(secretPrefix.length)
  if (encoded.length === 0 || !base64Pattern.test(encoded)) {
    throw new ConfigError(
      `secret of webhook "${webhook}" starts with whsec_ but the rest is not base64; use whsec_ + base64 of the key bytes, or a raw secret without the prefix`,
      { context: { webhook } },
    )
  }
  return Buffer.from(encoded, 'base64')
}

/** What is signed: the Standard Webhooks message id, unix-seconds timestamp and the exact body text. */
export interface SignInput {
  readonly id: string
  readonly timestampSeconds: number
  readonly body: string
}

/** Computes the `webhook-signature` value `v1,<base64 HMAC-SHA256 of "id.timestamp.body">`. */
export function signPayload(input: SignInput, key: Buffer): string {
  const mac = createHmac('sha256', key).update(`${input.id}.${input.timestampSeconds}.${input.body}`).digest('base64')
  return `v1,${mac}`
}

/** The Standard Webhooks headers of one delivery attempt (plus `Idempotency-Key`, same value as `webhook-id`). */
export type WebhookHeaders = Readonly<Record<string, string>>

/**
 * Builds the headers of one attempt: `webhook-id` and `Idempotency-Key` (both the digest id),
 * `webhook-timestamp` (unix seconds of the attempt) and, when a key is given, `webhook-signature`.
 */
export function webhookHeaders(input: SignInput, key: Buffer | null): WebhookHeaders {
  const headers: Record<string, string> = {
    'webhook-id': input.id,
    'webhook-timestamp': String(input.timestampSeconds),
    'idempotency-key': input.id,
  }
  if (key !== null) headers['webhook-signature'] = signPayload(input, key)
  return headers
}

/** Outcome of {@link verifySignature}. */
export type VerifyResult =
  | { readonly kind: 'valid' }
  | { readonly kind: 'invalid'; readonly reason: 'missing-header' | 'bad-timestamp' | 'stale-timestamp' | 'no-match' }

/** What a receiver has: the three headers as received, the raw body, and its clock. */
export interface VerifyInput {
  readonly id: string | undefined
  readonly timestamp: string | undefined
  readonly signature: string | undefined
  readonly body: string
  /** Receiver's clock, unix seconds. */
  readonly nowSeconds: number
  /** Allowed |now − timestamp| in seconds (default 300). */
  readonly toleranceSeconds?: number
}

/**
 * Verifies a Standard Webhooks signature. The header may carry several space-separated signatures
 * (key rotation); any `v1` match passes. Comparison is constant-time (`timingSafeEqual`), and a
 * timestamp outside the tolerance fails even with a matching signature (replay protection).
 */
export function verifySignature(input: VerifyInput, key: Buffer): VerifyResult {
  if (input.id === undefined || input.timestamp === undefined || input.signature === undefined) {
    return { kind: 'invalid', reason: 'missing-header' }
  }
  if (!/^[0-9]+$/.test(input.timestamp)) return { kind: 'invalid', reason: 'bad-timestamp' }
  const timestampSeconds = Number(input.timestamp)
  if (Math.abs(input.nowSeconds - timestampSeconds) > (input.toleranceSeconds ?? defaultToleranceSeconds)) {
    return { kind: 'invalid', reason: 'stale-timestamp' }
  }
  // Sign the header text as received, not a re-serialized number.
  const expected = createHmac('sha256', key).update(`${input.id}.${input.timestamp}.${input.body}`).digest()
  for (const part of input.signature.split(' ')) {
    const comma = part.indexOf(',')
    if (comma < 0 || part.slice(0, comma) !== 'v1') continue
    const given = Buffer.from(part.slice(comma + 1), 'base64')
    if (given.length === expected.length && timingSafeEqual(given, expected)) return { kind: 'valid' }
  }
  return { kind: 'invalid', reason: 'no-match' }
}
