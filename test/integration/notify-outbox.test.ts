/**
 * The outbox and the cooldown state on real files in mkdtemp folders, including a writer process
 * killed with SIGKILL right after it queued a notice.
 */
import { spawnSync } from 'node:child_process'
import { mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { type Logger, pino } from 'pino'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import { parseWindow } from '../../src/kernel/window.js'
import {
  cooldownStatePath,
  emptyCooldownState,
  filterByCooldown,
  loadCooldownState,
  saveCooldownState,
} from '../../src/notify/cooldown.js'
import { buildDigest } from '../../src/notify/digest.js'
import {
  createNotice,
  deadLetterDir,
  enqueue,
  markSent,
  moveExpiredToDeadLetter,
  type Notice,
  noticeFileName,
  outboxDir,
  pending,
  pruneSent,
  sentDir,
} from '../../src/notify/outbox.js'
import { shifted } from '../helpers/shift-rows.js'

const hourMs = 3_600_000
const createdAtMs = Date.UTC(2026, 11, 1, 2, 5)

let root = ''
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-outbox-'))
})
afterEach(async () => {
  await rm(root, { recursive: true, force: true })
})

function capturingLogger(): { log: Logger; lines: string[] } {
  const lines: string[] = []
  return { log: pino({ level: 'debug' }, { write: (s: string) => lines.push(s) }), lines }
}

function notice(webhook = 'ops-chat', week = 1, atMs = createdAtMs): Notice {
  const digest = buildDigest({
    job: 'cold-rooms',
    runId: `run-${week}`,
    keyColumns: ['site', 'compressor'],
    xUnit: 'hour',
    yUnit: 'kW',
    rows: [shifted(['north-7', 'c4'], week, 0.5, 1.7, 0.0012)],
    topN: 10,
    sendAllClear: false,
  })
  if (digest === null) throw new Error('expected a digest')
  return createNotice(digest, webhook, 'cloudevents', atMs)
}

describe('enqueue', () => {
  it('writes one JSON file per notice that a fresh read returns, with no URL or secret in it', async () => {
    const n = notice()
    expect(await enqueue(root, n)).toEqual({ kind: 'queued', file: join(outboxDir(root), noticeFileName(n)) })
    const { log } = capturingLogger()
    const listed = await pending(root, { log })
    expect(listed).toEqual([{ ...n, file: join(outboxDir(root), noticeFileName(n)) }])
    const text = await readFile(join(outboxDir(root), noticeFileName(n)), 'utf8')
    expect(Object.keys(JSON.parse(text) as object).sort()).toEqual(
      ['body', 'contentType', 'createdAtMs', 'format', 'id', 'runId', 'version', 'webhook'].sort(),
    )
  })

  it('queues nothing for a (digest, webhook) already pending or sent, and queues per webhook', async () => {
    const n = notice()
    await enqueue(root, n)
    expect((await enqueue(root, { ...n, runId: 'run-rerun' })).kind).toBe('duplicate')
    await markSent(root, n)
    expect(await enqueue(root, n)).toMatchObject({ kind: 'duplicate', where: 'sent' })
    expect((await enqueue(root, notice('on-call-pager'))).kind).toBe('queued')
  })

  it('gives webhooks with unsafe names distinct, safe file names', () => {
    const a = noticeFileName({ id: 'dg_x', webhook: '../ops chat' })
    const b = noticeFileName({ id: 'dg_x', webhook: '.._ops_chat' })
    expect(a).toMatch(/^dg_x--___ops_chat-[0-9a-f]{8}\.json$/)
    expect(a).not.toBe(b)
  })
})

describe('pending', () => {
  it('still lists a notice after the writing process was killed right after queuing it', async () => {
    const outboxModule = fileURLToPath(new URL('../../src/notify/outbox.ts', import.meta.url))
    const script = join(root, 'crash.mts')
    const n = notice()
    await writeFile(
      script,
      [
        `import { enqueue } from ${JSON.stringify(outboxModule)}`,
        `await enqueue(${JSON.stringify(root)}, ${JSON.stringify(n)})`,
        `process.kill(process.pid, 'SIGKILL')`,
      ].join('\n'),
    )
    const projectRoot = fileURLToPath(new URL('../..', import.meta.url))
    const child = spawnSync(process.execPath, ['--import', 'tsx', script], { cwd: projectRoot, encoding: 'utf8' })
    expect(child.stderr).toBe('')
    expect(child.signal).toBe('SIGKILL')
    const listed = await pending(root, capturingLogger())
    expect(listed.map((x) => [x.id, x.webhook, x.body])).toEqual([[n.id, n.webhook, n.body]])
  })

  it('ignores the temp file of an interrupted write', async () => {
    const n = notice()
    await enqueue(root, n)
    await writeFile(join(outboxDir(root), `${noticeFileName(notice('other'))}.tmp-4242`), '{"version":1,"web')
    expect((await pending(root, capturingLogger())).map((x) => x.webhook)).toEqual(['ops-chat'])
  })

  it('moves an unreadable notice to dead letters with a warning and lists the others', async () => {
    await enqueue(root, notice())
    await writeFile(join(outboxDir(root), 'dg_broken--x.json'), '{"version": 1')
    const { log, lines } = capturingLogger()
    expect((await pending(root, { log })).map((x) => x.webhook)).toEqual(['ops-chat'])
    expect(await readdir(deadLetterDir(root))).toEqual(['dg_broken--x.json'])
    expect(lines.some((l) => l.includes('unreadable notice moved to dead letters'))).toBe(true)
  })

  it('returns nothing when the outbox does not exist yet', async () => {
    expect(await pending(join(root, 'never-run'), capturingLogger())).toEqual([])
  })

  it('lists oldest first', async () => {
    await enqueue(root, notice('b-hook', 2, createdAtMs + 1000))
    await enqueue(root, notice('a-hook', 1, createdAtMs + 2000))
    await enqueue(root, notice('c-hook', 3, createdAtMs))
    expect((await pending(root, capturingLogger())).map((x) => x.webhook)).toEqual(['c-hook', 'b-hook', 'a-hook'])
  })
})

describe('markSent', () => {
  it('removes the notice from pending, keeps it under sent/, and is idempotent', async () => {
    const n = notice()
    await enqueue(root, n)
    await markSent(root, n)
    await markSent(root, n)
    expect(await pending(root, capturingLogger())).toEqual([])
    expect(await readdir(sentDir(root))).toEqual([noticeFileName(n)])
  })

  it('throws when the notice was never queued', async () => {
    await expect(markSent(root, notice())).rejects.toMatchObject({ code: 'ENOENT' })
  })
})

describe('moveExpiredToDeadLetter', () => {
  it('moves notices older than maxAgeHours with a warning and keeps younger ones pending', async () => {
    const old = notice('ops-chat', 1, createdAtMs)
    const young = notice('ops-chat', 2, createdAtMs + 70 * hourMs)
    await enqueue(root, old)
    await enqueue(root, young)
    const { log, lines } = capturingLogger()
    const moved = await moveExpiredToDeadLetter(root, createdAtMs + 72 * hourMs + 1, 72, { log })
    expect(moved.map((m) => m.id)).toEqual([old.id])
    expect((await pending(root, { log })).map((m) => m.id)).toEqual([young.id])
    expect(await readdir(deadLetterDir(root))).toEqual([noticeFileName(old)])
    const warning = lines.map((l) => JSON.parse(l) as Record<string, unknown>).find((l) => l.level === 40)
    expect(warning).toMatchObject({ msg: 'undelivered notice moved to dead letters', webhook: 'ops-chat', id: old.id })
    // A dead-lettered digest is not queued again by a rerun.
    expect(await enqueue(root, old)).toMatchObject({ kind: 'duplicate', where: 'dead-letter' })
  })

  it('keeps a notice exactly maxAgeHours old', async () => {
    await enqueue(root, notice())
    expect(await moveExpiredToDeadLetter(root, createdAtMs + 72 * hourMs, 72, capturingLogger())).toEqual([])
  })
})

describe('pruneSent', () => {
  it('deletes delivered notices older than keepHours and keeps newer ones', async () => {
    const old = notice('ops-chat', 1, createdAtMs)
    const recent = notice('ops-chat', 2, createdAtMs + 48 * hourMs)
    for (const n of [old, recent]) {
      await enqueue(root, n)
      await markSent(root, n)
    }
    expect(await pruneSent(root, createdAtMs + 24 * 30 * hourMs + hourMs, 24 * 30)).toBe(1)
    expect(await readdir(sentDir(root))).toEqual([noticeFileName(recent)])
    expect(await pruneSent(join(root, 'never-run'), createdAtMs, 1)).toBe(0)
  })
})

describe('loadCooldownState', () => {
  const week = parseWindow('7d')
  if (week === null) throw new Error('bad window')

  it('returns an empty state before the first save and what was saved afterwards', async () => {
    expect(await loadCooldownState(root)).toEqual(emptyCooldownState())
    const rows = [shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.0012)]
    const { next } = filterByCooldown(emptyCooldownState(), rows, 2, week)
    await saveCooldownState(root, next)
    const reread = await loadCooldownState(root)
    expect(reread).toEqual(next)
    // Re-read from disk: the same (series, window) is never notified again.
    expect(filterByCooldown(reread, rows, 2, week).held.map((h) => h.reason)).toEqual(['already-notified'])
  })

  it('throws an IoError naming the file and the fix when the state is corrupt', async () => {
    await saveCooldownState(root, emptyCooldownState())
    await writeFile(cooldownStatePath(root), '{"version": 2, "series": {}}')
    const err = await loadCooldownState(root).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_IO', exitCode: 74 })
    expect(String((err as Error).message)).toMatch(/notified\.json is not valid; move it aside/)
  })
})
