/**
 * Staging and flushing digests end to end: real outbox files in a mkdtemp folder, real node:http
 * receivers on port 0. Checks the promise of issue 5: one readable message per run per webhook,
 * exactly once for a receiver that dedupes on webhook-id, even with a flaky endpoint or a rerun.
 */
import { mkdtemp, readdir, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { type Logger, pino } from 'pino'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import digestSchemaFile from '../../schemas/digest.schema.json' with { type: 'json' }
import type { WebhookConfig } from '../../src/config/schema.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import { cooldownStatePath, loadCooldownState } from '../../src/notify/cooldown.js'
import { flushOutbox, undeliveredError } from '../../src/notify/flush.js'
import { markSent, outboxDir, pending, sentDir } from '../../src/notify/outbox.js'
import { verifySignature } from '../../src/notify/sign.js'
import { type StageInput, stageDigests } from '../../src/notify/stage.js'
import type { ShiftRow } from '../../src/types.js'
import { startServer, type TestServer } from '../helpers/http-server.js'
import { checkJsonSchema } from '../helpers/json-schema-check.js'
import { shifted, shiftRow } from '../helpers/shift-rows.js'

const secret = 'whsec_Y29sZC1yb29tLWRpZ2VzdC1zaWduaW5nLWtleS0wMQ=='
const nowMs = Date.UTC(2026, 12 - 1, 1, 2, 5)
const week = parseWindow('7d') as WindowSpec

let root = ''
const servers: TestServer[] = []
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-flush-'))
})
afterEach(async () => {
  await Promise.all(servers.splice(0).map((s) => s.close()))
  await rm(root, { recursive: true, force: true })
})

async function serve(...script: Parameters<typeof startServer>): Promise<TestServer> {
  const s = await startServer(...script)
  servers.push(s)
  return s
}

function webhook(name: string, url: string, fields: Partial<WebhookConfig> = {}): WebhookConfig {
  return {
    name,
    url,
    format: 'text',
    timeoutMs: 2000,
    maxAttempts: 3,
    minBackoffMs: 1,
    maxBackoffMs: 5,
    topN: 20,
    sendAllClear: false,
    ...fields,
  }
}

function logger(): { log: Logger; lines: string[] } {
  const lines: string[] = []
  return { log: pino({ level: 'debug' }, { write: (s: string) => lines.push(s) }), lines }
}

const runRows: ShiftRow[] = [
  shiftRow(['north-7', 'c1'], 1),
  shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.0012),
  shifted(['harbour-2', 'c1'], 1, 0.5, -0.4, 0.01),
]

function stageInput(webhooks: readonly WebhookConfig[], rows: readonly ShiftRow[] = runRows): StageInput {
  return {
    root,
    job: 'cold-rooms',
    runId: 'run-2026-12-01T02-00',
    keyColumns: ['site', 'compressor'],
    xUnit: 'hour',
    yUnit: 'kW',
    rows,
    webhooks,
    cooldownWindows: 0,
    window: week,
    nowMs,
  }
}

function deps(log: Logger) {
  return { log, now: () => nowMs, sleep: async () => {} }
}

describe('stageDigests', () => {
  it('queues one digest per webhook in its format and records the notified series', async () => {
    const hooks = [
      webhook('ops-chat', 'http://127.0.0.1:9/a'),
      webhook('events', 'http://127.0.0.1:9/b', { format: 'cloudevents' }),
    ]
    const result = await stageDigests(stageInput(hooks))
    expect(result.staged.map((s) => [s.webhook, s.enqueue?.kind, s.notice?.format])).toEqual([
      ['ops-chat', 'queued', 'text'],
      ['events', 'queued', 'cloudevents'],
    ])
    const queued = await pending(root, logger())
    expect(queued).toHaveLength(2)
    expect(new Set(queued.map((q) => q.id)).size).toBe(1)
    const event = JSON.parse(queued.find((q) => q.webhook === 'events')?.body ?? '{}') as Record<string, unknown>
    expect(checkJsonSchema(digestSchemaFile, event.data)).toEqual([])
    const state = await loadCooldownState(root)
    expect(Object.keys(state.series).sort()).toEqual(['["harbour-2","c1"]', '["north-7","c4"]'])
  })

  it('writes nothing in a dry run but returns what would be sent', async () => {
    const result = await stageDigests({ ...stageInput([webhook('ops-chat', 'http://127.0.0.1:9/a')]), dryRun: true })
    expect(result.staged[0]?.notice?.body).toContain('rising 3.4× faster than the previous window')
    expect(result.staged[0]?.enqueue).toBeNull()
    await expect(readdir(join(root, '_state'))).rejects.toMatchObject({ code: 'ENOENT' })
  })

  it('queues nothing when nothing shifted and no all-clear is configured', async () => {
    const result = await stageDigests(
      stageInput([webhook('ops-chat', 'http://127.0.0.1:9/a')], [runRows[0] as ShiftRow]),
    )
    expect(result.staged).toEqual([{ webhook: 'ops-chat', digest: null, notice: null, enqueue: null }])
    expect(await pending(root, logger())).toEqual([])
  })
})

describe('flushOutbox', () => {
  it('delivers a staged digest once per webhook; a rerun of the same run sends nothing', async () => {
    const chat = await serve([{ status: 200 }])
    const events = await serve([{ status: 202 }])
    const hooks = [webhook('ops-chat', chat.url, { secret }), webhook('events', events.url, { format: 'cloudevents' })]
    const { log } = logger()

    await stageDigests(stageInput(hooks))
    const first = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(first).toMatchObject({ sent: 2, rejected: 0, failed: 0, pending: 0, deadLettered: 0 })
    expect(undeliveredError(first)).toBeNull()

    // Rerun: same rows, new run id. Cooldown holds every shift; the outbox has nothing to send.
    const rerun = await stageDigests({ ...stageInput(hooks), runId: 'run-2026-12-01T02-00-retry' })
    expect(rerun.staged.every((s) => s.digest === null)).toBe(true)
    expect(rerun.cooldown.held.map((h) => h.reason)).toEqual(['already-notified', 'already-notified'])
    const second = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(second).toMatchObject({ sent: 0, pending: 0 })

    expect(chat.requests).toHaveLength(1)
    expect(events.requests).toHaveLength(1)
    const [msg] = chat.requests
    if (msg === undefined) throw new Error('no request')
    const verified = verifySignature(
      {
        id: msg.headers['webhook-id'] as string,
        timestamp: msg.headers['webhook-timestamp'] as string,
        signature: msg.headers['webhook-signature'] as string,
        body: msg.body,
        nowSeconds: nowMs / 1000,
      },
      Buffer.from(secret.slice(6), 'base64'),
    )
    expect(verified.kind).toBe('valid')
    expect((JSON.parse(msg.body) as { text: string }).text.split('\n')[0]).toBe(
      'slopeshift · cold-rooms: 2 trend shifts to review',
    )
    expect(events.requests[0]?.headers['content-type']).toBe('application/cloudevents+json; charset=utf-8')
    expect(events.requests[0]?.headers['webhook-signature']).toBeUndefined()
  })

  it('leaves the digest pending when the endpoint stays down, ends with exit 75, and delivers it next run unchanged', async () => {
    const down = await serve([{ status: 503 }])
    const hooks = [webhook('ops-chat', down.url)]
    const { log } = logger()
    await stageDigests(stageInput(hooks))
    const failed = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(failed).toMatchObject({ sent: 0, failed: 1, pending: 1 })
    expect(down.requests).toHaveLength(3)
    const err = undeliveredError(failed)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_WEBHOOK_UNDELIVERED', exitCode: 75 })
    expect(err?.message).toBe(
      '1 digest(s) not delivered to webhook(s) ops-chat; results are committed and the digests stay in the outbox, rerun later to deliver',
    )

    const up = await serve([{ status: 200 }])
    const fixed = [webhook('ops-chat', up.url)]
    const next = await flushOutbox(root, { webhooks: fixed, maxAgeHours: 72 }, deps(log))
    expect(next).toMatchObject({ sent: 1, pending: 0 })
    expect(up.requests[0]?.headers['webhook-id']).toBe(down.requests[0]?.headers['webhook-id'])
    expect(up.requests[0]?.body).toBe(down.requests[0]?.body)
  })

  it('re-sends with the same webhook-id and body after a crash between the 2xx and markSent', async () => {
    const receiver = await serve([{ status: 200 }])
    const hooks = [webhook('ops-chat', receiver.url)]
    const { log } = logger()
    await stageDigests(stageInput(hooks))
    // Simulated crash right after the receiver answered 2xx: the logger throws on the 'webhook delivered'
    // line, which deliver() writes after the response and before flushOutbox() moves the notice to sent/.
    const crashing = pino(
      { level: 'info' },
      {
        write: (s: string) => {
          if (s.includes('webhook delivered')) throw new Error('simulated crash after 2xx')
        },
      },
    )
    await expect(flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(crashing))).rejects.toThrow(
      'simulated crash after 2xx',
    )
    expect(await pending(root, { log })).toHaveLength(1)
    const again = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(again).toMatchObject({ sent: 1, pending: 0 })
    expect(receiver.requests).toHaveLength(2)
    expect(receiver.requests[1]?.headers['webhook-id']).toBe(receiver.requests[0]?.headers['webhook-id'])
    expect(receiver.requests[1]?.body).toBe(receiver.requests[0]?.body)
    expect(await readdir(sentDir(root))).toHaveLength(1)
  })

  it('keeps a rejected digest pending (until max age), reports it, and goes on with other webhooks', async () => {
    const strict = await serve([{ status: 422, body: 'unknown field text' }])
    const ok = await serve([{ status: 200 }])
    const hooks = [webhook('strict', strict.url), webhook('ops-chat', ok.url)]
    const { log } = logger()
    await stageDigests(stageInput(hooks))
    const summary = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(summary).toMatchObject({ sent: 1, rejected: 1, pending: 1 })
    expect(strict.requests).toHaveLength(1)
    expect(undeliveredError(summary)?.exitCode).toBe(75)
    expect((await pending(root, { log })).map((p) => p.webhook)).toEqual(['strict'])
  })

  it('skips the rest of a webhook’s notices after one failed, and leaves notices of unknown webhooks pending', async () => {
    const down = await serve([{ status: 500 }])
    const hooks = [webhook('ops-chat', down.url)]
    const { log, lines } = logger()
    await stageDigests(stageInput([...hooks, webhook('retired', 'http://127.0.0.1:9/x')]))
    await stageDigests({ ...stageInput(hooks, [shifted(['north-7', 'c4'], 2, 1.7, 0.3, 0.001)]), runId: 'run-2' })
    const summary = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(log))
    expect(summary).toMatchObject({ sent: 0, failed: 1, skipped: 2, pending: 3 })
    expect(down.requests).toHaveLength(3)
    expect(lines.some((l) => l.includes('notice for unconfigured webhook left pending'))).toBe(true)
  })

  it('moves digests older than maxAgeHours to dead letters before sending', async () => {
    const receiver = await serve([{ status: 200 }])
    const hooks = [webhook('ops-chat', receiver.url)]
    const { log } = logger()
    await stageDigests(stageInput(hooks))
    const later = { ...deps(log), now: () => nowMs + 73 * 3_600_000 }
    const summary = await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, later)
    expect(summary).toMatchObject({ sent: 0, deadLettered: 1, pending: 0 })
    expect(receiver.requests).toHaveLength(0)
    expect(await readdir(join(outboxDir(root), 'dead-letter'))).toHaveLength(1)
  })

  it('throws a config error for a malformed secret before sending anything', async () => {
    const receiver = await serve([{ status: 200 }])
    const hooks = [webhook('ops-chat', receiver.url, { secret: 'whsec_***' })]
    await stageDigests(stageInput(hooks))
    await expect(flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(logger().log))).rejects.toMatchObject({
      code: 'SLOPESHIFT_CONFIG',
      exitCode: 78,
    })
    expect(receiver.requests).toHaveLength(0)
  })

  it('marks nothing twice: markSent after a flush is a no-op and the state file exists', async () => {
    const receiver = await serve([{ status: 200 }])
    const hooks = [webhook('ops-chat', receiver.url)]
    const staged = await stageDigests(stageInput(hooks))
    await flushOutbox(root, { webhooks: hooks, maxAgeHours: 72 }, deps(logger().log))
    const n = staged.staged[0]?.notice
    if (n === null || n === undefined) throw new Error('expected a notice')
    await markSent(root, n)
    expect(await readdir(sentDir(root))).toHaveLength(1)
    expect(await readdir(join(root, '_state'))).toContain(cooldownStatePath(root).split('/').pop())
  })
})
