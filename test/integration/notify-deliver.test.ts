/**
 * deliver() against a real node:http server on port 0: retry policy, Retry-After, timeouts,
 * non-retryable answers, Standard Webhooks headers and signatures, and what reaches the logs.
 */
import { createHmac, timingSafeEqual } from 'node:crypto'
import { type Logger, pino } from 'pino'
import { afterEach, describe, expect, it } from 'vitest'
import { redactPaths } from '../../src/log.js'
import { type DeliveryRequest, deliver, type RetryPolicy } from '../../src/notify/deliver.js'
import { parseWebhookSecret } from '../../src/notify/sign.js'
import { type RecordedRequest, type ScriptStep, startServer, type TestServer } from '../helpers/http-server.js'

const secret = 'whsec_a2V5LWZvci1jb2xkLXJvb20tZGlnZXN0cy0yMDI2LTEy'
const body = '{"text":"slopeshift · cold-rooms: 1 trend shift to review"}'
const policy: RetryPolicy = { timeoutMs: 2000, maxAttempts: 4, minBackoffMs: 100, maxBackoffMs: 5000 }
const nowMs = Date.UTC(2026, 11, 1, 2, 5, 0)

let server: TestServer | null = null
afterEach(async () => {
  await server?.close()
  server = null
})

async function serve(script: readonly ScriptStep[]): Promise<TestServer> {
  server = await startServer(script)
  return server
}

function request(url: string, key: Buffer | null = null): DeliveryRequest {
  return {
    webhook: 'ops-chat',
    url,
    id: 'dg_0123456789abcdef0123456789abcdef',
    body,
    contentType: 'application/json; charset=utf-8',
    key,
  }
}

/** Logger that keeps its JSON lines, with the same redaction as the CLI's. */
function capturingLogger(): { log: Logger; lines: string[] } {
  const lines: string[] = []
  const log = pino(
    { level: 'debug', redact: { paths: redactPaths, censor: '[redacted]' } },
    { write: (s: string) => lines.push(s) },
  )
  return { log, lines }
}

/** Injected effects: sleeps are recorded and return at once; random is fixed; the clock is fixed. */
function effects(random = 0.5) {
  const sleeps: number[] = []
  const { log, lines } = capturingLogger()
  return {
    sleeps,
    lines,
    deps: {
      log,
      sleep: async (ms: number) => {
        sleeps.push(ms)
      },
      random: () => random,
      now: () => nowMs,
    },
  }
}

/**
 * A receiver written from the README recipe (README.md, "Verifying a request"), independent of src/notify/sign.ts:
 * key from whsec_ (base64) or raw UTF-8, HMAC-SHA256 over "id.timestamp.body", any v1 entry, 5-minute window.
 */
function recipeVerify(secretText: string, req: RecordedRequest, nowSeconds: number): boolean {
  const id = req.headers['webhook-id']
  const ts = req.headers['webhook-timestamp']
  const sig = req.headers['webhook-signature']
  if (typeof id !== 'string' || typeof ts !== 'string' || typeof sig !== 'string') return false
  if (!/^\d+$/.test(ts) || Math.abs(nowSeconds - Number(ts)) > 300) return false
  const key = secretText.startsWith('whsec_')
    ? Buffer.from(secretText.slice(6), 'base64')
    : Buffer.from(secretText, 'utf8')
  const expected = createHmac('sha256', key).update(`${id}.${ts}.${req.body}`).digest()
  return sig.split(' ').some((entry) => {
    const [version, value = ''] = entry.split(',')
    const given = Buffer.from(value, 'base64')
    return version === 'v1' && given.length === expected.length && timingSafeEqual(given, expected)
  })
}

describe('deliver', () => {
  it('retries 503 twice with full-jitter backoff, then reports delivered after 3 attempts', async () => {
    const s = await serve([{ status: 503 }, { status: 503 }, { status: 200 }])
    const e = effects(0.5)
    const result = await deliver(request(s.url), policy, e.deps)
    expect(result).toEqual({ kind: 'delivered', attempts: 3, status: 200 })
    expect(s.requests).toHaveLength(3)
    // random 0.5 · min(5000, 100·2^(retry−1)) for retries 1 and 2.
    expect(e.sleeps).toEqual([50, 100])
    const ids = s.requests.map((r) => r.headers['webhook-id'])
    expect(new Set(ids)).toEqual(new Set(['dg_0123456789abcdef0123456789abcdef']))
    expect(s.requests.every((r) => r.body === body && r.method === 'POST' && r.path === '/hook')).toBe(true)
  })

  it('honours Retry-After in seconds on 429', async () => {
    const s = await serve([{ status: 429, headers: { 'retry-after': '3' } }, { status: 202 }])
    const e = effects()
    expect(await deliver(request(s.url), policy, e.deps)).toEqual({ kind: 'delivered', attempts: 2, status: 202 })
    expect(e.sleeps).toEqual([3000])
  })

  it('honours Retry-After as an HTTP date on 503', async () => {
    const at = new Date(nowMs + 4000).toUTCString()
    const s = await serve([{ status: 503, headers: { 'retry-after': at } }, { status: 200 }])
    const e = effects()
    expect((await deliver(request(s.url), policy, e.deps)).kind).toBe('delivered')
    expect(e.sleeps).toEqual([4000])
  })

  it('stops and reports failed when Retry-After is longer than maxBackoffMs', async () => {
    const s = await serve([{ status: 429, headers: { 'retry-after': '3600' } }, { status: 200 }])
    const e = effects()
    const result = await deliver(request(s.url), policy, e.deps)
    expect(result.kind).toBe('failed')
    expect(result.attempts).toBe(1)
    if (result.kind === 'failed') {
      expect(result.status).toBe(429)
      expect(result.lastError).toBe('HTTP 429; Retry-After 3600 s exceeds maxBackoffMs 5000, left for the next run')
    }
    expect(s.requests).toHaveLength(1)
    expect(e.sleeps).toEqual([])
  })

  it('retries a request that hangs past the timeout, then reports failed', async () => {
    const s = await serve([{ hang: true }])
    const e = effects()
    const result = await deliver(request(s.url), { ...policy, timeoutMs: 150, maxAttempts: 2 }, e.deps)
    expect(result).toEqual({ kind: 'failed', attempts: 2, lastError: 'timed out after 150 ms', status: null })
    expect(s.requests).toHaveLength(2)
    expect(e.sleeps).toHaveLength(1)
  })

  it('retries 408 and gives up after maxAttempts with the last status', async () => {
    const s = await serve([{ status: 408 }])
    const e = effects()
    const result = await deliver(request(s.url), { ...policy, maxAttempts: 3 }, e.deps)
    expect(result).toEqual({ kind: 'failed', attempts: 3, lastError: 'HTTP 408', status: 408 })
    expect(s.requests).toHaveLength(3)
  })

  it('does not retry a 400 and reports it rejected with the status, a hint and the receiver’s reason', async () => {
    const s = await serve([{ status: 400, body: 'missing field "blocks"' }, { status: 200 }])
    const e = effects()
    const result = await deliver(request(s.url), policy, e.deps)
    expect(result).toEqual({
      kind: 'rejected',
      status: 400,
      attempts: 1,
      hint: 'the endpoint did not accept the payload; check that the webhook format (text or cloudevents) is what it expects',
      detail: 'missing field "blocks"',
    })
    expect(s.requests).toHaveLength(1)
    const rejected = e.lines.map((l) => JSON.parse(l) as Record<string, unknown>).find((l) => l.level === 50)
    expect(rejected).toMatchObject({ msg: 'webhook rejected delivery', status: 400, webhook: 'ops-chat' })
  })

  it('does not follow a redirect (the signature must not travel to another host)', async () => {
    const other = await startServer([{ status: 200 }])
    try {
      const s = await serve([{ status: 302, headers: { location: other.url } }])
      const result = await deliver(request(s.url, parseWebhookSecret(secret)), policy, effects().deps)
      expect(result.kind).toBe('rejected')
      expect(result.kind === 'rejected' ? result.status : 0).toBe(302)
      expect(other.requests).toHaveLength(0)
    } finally {
      await other.close()
    }
  })

  it('retries when the connection is refused and reports the network error without the URL', async () => {
    const s = await serve([{ status: 200 }])
    const url = `${s.url}?token=hunter2-cold-room`
    await s.close()
    server = null
    const e = effects()
    const result = await deliver(request(url), { ...policy, maxAttempts: 2 }, e.deps)
    expect(result.kind).toBe('failed')
    if (result.kind === 'failed') {
      expect(result.lastError).toMatch(/ECONNREFUSED/)
      expect(result.lastError).not.toContain('hunter2')
    }
    expect(e.sleeps).toHaveLength(1)
    expect(e.lines.join('\n')).not.toContain('hunter2')
  })

  it('sends Standard Webhooks headers and a signature that the README recipe verifies', async () => {
    const s = await serve([{ status: 204 }])
    await deliver(request(s.url, parseWebhookSecret(secret)), policy, effects().deps)
    const [req] = s.requests
    if (req === undefined) throw new Error('no request recorded')
    expect(req.headers['webhook-id']).toBe('dg_0123456789abcdef0123456789abcdef')
    expect(req.headers['idempotency-key']).toBe(req.headers['webhook-id'])
    expect(req.headers['webhook-timestamp']).toBe(String(nowMs / 1000))
    expect(req.headers['content-type']).toBe('application/json; charset=utf-8')
    expect(req.headers['webhook-signature']).toMatch(/^v1,[A-Za-z0-9+/]+=*$/)
    expect(recipeVerify(secret, req, nowMs / 1000)).toBe(true)
    expect(recipeVerify(secret, { ...req, body: req.body.replace('1 trend', '2 trend') }, nowMs / 1000)).toBe(false)
    expect(recipeVerify('whsec_b3RoZXIta2V5LWJ5dGVz', req, nowMs / 1000)).toBe(false)
    expect(recipeVerify(secret, req, nowMs / 1000 + 600)).toBe(false)
  })

  it('signs with the UTF-8 bytes of a raw secret, as the recipe says', async () => {
    const raw = 'cold-room raw secret'
    const s = await serve([{ status: 200 }])
    await deliver(request(s.url, parseWebhookSecret(raw)), policy, effects().deps)
    const [req] = s.requests
    if (req === undefined) throw new Error('no request recorded')
    expect(recipeVerify(raw, req, nowMs / 1000)).toBe(true)
    expect(recipeVerify(`whsec_${Buffer.from(raw).toString('base64')}`, req, nowMs / 1000)).toBe(true)
  })

  it('sends no signature header without a key', async () => {
    const s = await serve([{ status: 200 }])
    await deliver(request(s.url), policy, effects().deps)
    expect(s.requests[0]?.headers['webhook-signature']).toBeUndefined()
    expect(s.requests[0]?.headers['webhook-id']).toBe('dg_0123456789abcdef0123456789abcdef')
  })

  it('logs each failed attempt with the webhook name, never the URL or the signature', async () => {
    const s = await serve([{ status: 500 }, { status: 200 }])
    const e = effects()
    await deliver(request(`${s.url}/T0KEN-secret-path`, parseWebhookSecret(secret)), policy, e.deps)
    const logs = e.lines.map((l) => JSON.parse(l) as Record<string, unknown>)
    expect(logs.map((l) => l.msg)).toEqual(['webhook attempt failed', 'webhook delivered'])
    expect(logs[0]).toMatchObject({ webhook: 'ops-chat', attempt: 1, status: 500, delayMs: 50, level: 40 })
    const all = e.lines.join('\n')
    expect(all).not.toContain('T0KEN')
    expect(all).not.toContain('127.0.0.1')
    expect(all).not.toContain('v1,')
  })

  it('stops without further attempts when the abort signal fires during a backoff', async () => {
    const s = await serve([{ status: 503 }])
    const controller = new AbortController()
    const e = effects()
    const result = await deliver(request(s.url), policy, {
      ...e.deps,
      signal: controller.signal,
      sleep: async () => {
        controller.abort()
        throw new Error('aborted')
      },
    })
    expect(result).toEqual({
      kind: 'failed',
      attempts: 1,
      lastError: 'stopped by signal before delivery finished',
      status: 503,
    })
    expect(s.requests).toHaveLength(1)
  })

  it('waits with real timers by default (millisecond backoff)', async () => {
    const s = await serve([{ status: 503 }, { status: 200 }])
    const { log } = capturingLogger()
    const result = await deliver(request(s.url), { ...policy, minBackoffMs: 5, maxBackoffMs: 10 }, { log })
    expect(result).toEqual({ kind: 'delivered', attempts: 2, status: 200 })
  })
})
