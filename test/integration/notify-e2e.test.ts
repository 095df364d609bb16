/**
 * Issue 5 end to end: the built CLI runs on a small invented lake with one bending unit, publishes its
 * tables and posts one digest to a real HTTP server. Killed between publish and delivery, the rerun
 * delivers the same digest (same webhook-id, same body); further reruns send nothing.
 */
import { createHmac } from 'node:crypto'
import { mkdtemp, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterEach, describe, expect, it } from 'vitest'
import { hasBuiltCli, noCliReason, runCli, spawnCli } from '../helpers/cli.js'
import { startServer, type TestServer } from '../helpers/http-server.js'
import { bendingUnit, jobConfig, writeDay } from '../helpers/lake.js'

const secret = `whsec_${Buffer.from('slopeshift-test-key-0123456789').toString('base64')}`

async function setup(server: TestServer, format: 'text' | 'cloudevents' = 'text') {
  const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-notify-e2e-'))
  const lake = path.join(dir, 'lake')
  for (let d = 0; d <= bendingUnit.day + 1; d++) await writeDay(lake, d)
  const config = path.join(dir, 'job.json')
  await writeFile(
    config,
    JSON.stringify({
      ...jobConfig({ paths: [lake], root: path.join(dir, 'out') }),
      notify: {
        webhooks: [
          { name: 'ops', url: '${HOOK_URL}', secret: '${HOOK_SECRET}', format, minBackoffMs: 1, maxBackoffMs: 5 },
        ],
      },
    }),
  )
  return { dir, config, env: { HOOK_URL: server.url, HOOK_SECRET: secret } }
}

describe.skipIf(!hasBuiltCli)(`digest delivery through the CLI (${noCliReason})`, () => {
  let server: TestServer | null = null
  afterEach(async () => {
    await server?.close()
    server = null
  })

  it('posts one signed digest naming the bending unit, and nothing on a rerun', async () => {
    server = await startServer()
    const { config, env } = await setup(server)
    const first = await runCli(['run', '--config', config, '--json'], { env })
    expect(first.code, first.stderr).toBe(0)
    expect(first.summary?.shifts).toBeGreaterThanOrEqual(1)
    expect(first.summary?.notices).toEqual({ sent: 1, pending: 0 })
    expect(server.requests).toHaveLength(1)
    const req = server.requests[0] as NonNullable<TestServer['requests'][0]>
    const text = (JSON.parse(req.body) as { text: string }).text
    expect(text).toContain(`${bendingUnit.site}`)
    expect(text).toMatch(/Advisory/)
    // Signature per the README recipe (Standard Webhooks): base64 HMAC-SHA256 over id.timestamp.body.
    const key = Buffer.from(secret.slice('whsec_'.length), 'base64')
    const id = String(req.headers['webhook-id'])
    const ts = String(req.headers['webhook-timestamp'])
    const expected = createHmac('sha256', key).update(`${id}.${ts}.${req.body}`).digest('base64')
    expect(String(req.headers['webhook-signature'])).toBe(`v1,${expected}`)
    expect(req.headers['idempotency-key']).toBe(id)
    // Secrets and URLs never reach the logs.
    expect(first.stderr).not.toContain(server.url)
    expect(first.stderr).not.toContain(secret)

    const again = await runCli(['run', '--config', config, '--json'], { env })
    expect(again.code, again.stderr).toBe(0)
    expect(server.requests).toHaveLength(1)
  })

  it('delivers exactly once when killed between publish and delivery', async () => {
    // The first request hangs, so the process is inside delivery (tables committed) when it is killed.
    server = await startServer([{ hang: true }, { status: 200 }])
    const { config, env } = await setup(server, 'cloudevents')
    const proc = spawnCli(['run', '--config', config, '--json'], { env })
    expect(await proc.waitForLog('run committed')).toBe(true)
    for (let i = 0; i < 200 && server.requests.length === 0; i++) await new Promise((r) => setTimeout(r, 25))
    proc.child.kill('SIGKILL')
    const killed = await proc.result
    expect(killed.signal).toBe('SIGKILL')

    const rerun = await runCli(['run', '--config', config, '--json'], { env })
    expect(rerun.code, rerun.stderr).toBe(0)
    expect(rerun.summary?.files.read).toBe(0)
    expect(rerun.summary?.notices).toEqual({ sent: 1, pending: 0 })
    const ids = server.requests.map((r) => r.headers['webhook-id'])
    expect(new Set(ids).size).toBe(1)
    expect(server.requests.map((r) => r.body)).toEqual([server.requests[0]?.body, server.requests[0]?.body])
    const event = JSON.parse(server.requests[1]?.body ?? '{}') as Record<string, unknown>
    expect(event.specversion).toBe('1.0')
    expect(event.id).toBe(ids[0])

    const third = await runCli(['run', '--config', config, '--json'], { env })
    expect(third.code).toBe(0)
    expect(server.requests).toHaveLength(2)
  })

  it('exits 75 when the webhook stays down, keeps the committed tables, and the next run delivers', async () => {
    server = await startServer([
      { status: 503 },
      { status: 503 },
      { status: 503 },
      { status: 503 },
      { status: 503 },
      { status: 200 },
    ])
    const { config, env } = await setup(server)
    const down = await runCli(['run', '--config', config, '--json'], { env })
    expect(down.code).toBe(75)
    expect(down.lastLog?.code).toBe('SLOPESHIFT_WEBHOOK_UNDELIVERED')
    const dry = await runCli(['notify', '--config', config, '--dry-run'], { env })
    expect(dry.code).toBe(0)
    expect(dry.stdout).toMatch(/webhook-id dg_/)
    const later = await runCli(['run', '--config', config, '--json'], { env })
    expect(later.code, later.stderr).toBe(0)
    expect(later.summary?.files.read).toBe(0)
    expect(later.summary?.notices).toEqual({ sent: 1, pending: 0 })
  })
})
