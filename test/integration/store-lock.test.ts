import { spawn } from 'node:child_process'
import { mkdir, mkdtemp, readFile, rm, stat, utimes, writeFile } from 'node:fs/promises'
import { hostname, tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import { pathToFileURL } from 'node:url'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import { acquireRunLock, processStart, readHolder, runLockPath } from '../../src/store/lock.js'

const projectRoot = resolve(import.meta.dirname, '../..')
let root: string
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-lock-'))
})
afterEach(async () => {
  await rm(root, { recursive: true, force: true })
})

function run(args: readonly string[]): Promise<{ code: number | null; pid: number; stderr: string }> {
  return new Promise((done, fail) => {
    const child = spawn(process.execPath, args, { cwd: projectRoot, stdio: ['ignore', 'ignore', 'pipe'] })
    let stderr = ''
    child.stderr.on('data', (d: Buffer) => {
      stderr += d.toString()
    })
    child.on('error', fail)
    child.on('exit', (code) => done({ code, pid: child.pid ?? -1, stderr }))
  })
}

/** The pid of a process that has exited (so `process.kill(pid, 0)` fails with ESRCH). */
async function deadPid(): Promise<number> {
  const { pid, code } = await run(['-e', ''])
  expect(code).toBe(0)
  return pid
}

async function writeLock(holder: object): Promise<void> {
  await mkdir(join(root, '_state'), { recursive: true })
  await writeFile(runLockPath(root), JSON.stringify(holder))
}

/** A child that takes the lock `iterations` times, holds it 300 ms each, and logs start/end. */
async function writeWorker(): Promise<string> {
  const script = join(root, 'worker.mts')
  const lockUrl = pathToFileURL(join(projectRoot, 'src/store/lock.ts')).href
  await writeFile(
    script,
    `import { appendFileSync } from 'node:fs'
import { setTimeout as sleep } from 'node:timers/promises'
import { acquireRunLock } from ${JSON.stringify(lockUrl)}
const [root, log, name, iterations] = process.argv.slice(2)
for (let i = 0; i < Number(iterations); i++) {
  const release = await acquireRunLock(root, { runId: name + '-' + i, waitMs: 60000, pollMs: 5 })
  appendFileSync(log, 'start ' + name + '\\n')
  await sleep(300)
  appendFileSync(log, 'end ' + name + '\\n')
  await release()
}
`,
  )
  return script
}

async function race(workers: number, iterations: number): Promise<string[]> {
  const script = await writeWorker()
  const log = join(root, 'log.txt')
  await writeFile(log, '')
  const results = await Promise.all(
    Array.from({ length: workers }, (_, i) => run(['--import', 'tsx', script, root, log, `w${i}`, String(iterations)])),
  )
  for (const r of results) expect(r.stderr).toBe('')
  expect(results.map((r) => r.code)).toEqual(Array(workers).fill(0))
  return (await readFile(log, 'utf8')).trim().split('\n')
}

function expectNoOverlap(lines: readonly string[], workers: number, iterations: number): void {
  expect(lines).toHaveLength(2 * workers * iterations)
  for (let i = 0; i < lines.length; i += 2) {
    const name = lines[i]?.split(' ')[1]
    expect([lines[i], lines[i + 1]]).toEqual([`start ${name}`, `end ${name}`])
  }
}

describe('acquireRunLock', () => {
  it('writes the holder and removes the lock on release', async () => {
    const release = await acquireRunLock(root, { runId: 'run-1', waitMs: 0 })
    expect(await readHolder(runLockPath(root))).toMatchObject({
      pid: process.pid,
      hostname: hostname(),
      runId: 'run-1',
    })
    await release()
    expect(await readHolder(runLockPath(root))).toBe('gone')
    await release()
  })

  it('makes a second acquire wait, then fail with exit 75 naming the holder and the fix', async () => {
    const release = await acquireRunLock(root, { runId: 'run-1', waitMs: 0 })
    const t0 = Date.now()
    const err = await acquireRunLock(root, { runId: 'run-2', waitMs: 150, pollMs: 20 }).catch((e: unknown) => e)
    expect(Date.now() - t0).toBeGreaterThanOrEqual(140)
    expect(err).toMatchObject({ name: 'TempFailError', code: 'SLOPESHIFT_LOCKED', exitCode: 75 })
    expect((err as Error).message).toMatch(
      new RegExp(`is locked by run run-1 \\(pid ${process.pid} on .+, since .+\\); waited 150 ms\\. Retry later`),
    )
    expect((err as Error).message).toMatch(/delete .*run\.lock$/)
    await release()
    const again = await acquireRunLock(root, { runId: 'run-2', waitMs: 0 })
    await again()
  })

  it('takes over a lock left by a dead process on this host', async () => {
    const pid = await deadPid()
    await writeLock({ pid, hostname: hostname(), startedAt: '2026-01-01T00:00:00.000Z', runId: 'killed' })
    const release = await acquireRunLock(root, { runId: 'run-new', waitMs: 0 })
    expect(await readHolder(runLockPath(root))).toMatchObject({ pid: process.pid, runId: 'run-new' })
    await release()
  })

  it('clears a takeover guard left by a process killed mid-takeover, then takes over', async () => {
    const pid = await deadPid()
    const dead = { pid, hostname: hostname(), startedAt: '2026-01-01T00:00:00.000Z', runId: 'killed' }
    await writeLock(dead)
    await writeFile(`${runLockPath(root)}.takeover`, JSON.stringify({ ...dead, runId: 'takeover' }))
    const release = await acquireRunLock(root, { runId: 'after', waitMs: 1000, pollMs: 5 })
    expect(await readHolder(runLockPath(root))).toMatchObject({ runId: 'after' })
    expect(await readHolder(`${runLockPath(root)}.takeover`)).toBe('gone')
    await release()
  })

  it.skipIf(process.platform !== 'linux')(
    'takes over a lock whose pid was reused by another live process (Linux)',
    async () => {
      const child = spawn(process.execPath, ['-e', 'setTimeout(() => {}, 20000)'], { stdio: 'ignore' })
      try {
        const pid = child.pid ?? -1
        const start = await processStart(pid)
        expect(start).toMatch(/^[0-9]+$/)
        const holder = { pid, hostname: hostname(), startedAt: '2026-01-01T00:00:00.000Z', runId: 'live' }
        await writeLock({ ...holder, procStart: start })
        const err = await acquireRunLock(root, { runId: 'r', waitMs: 30, pollMs: 10 }).catch((e: unknown) => e)
        expect(err).toMatchObject({ code: 'SLOPESHIFT_LOCKED', exitCode: 75 })
        await writeLock({ ...holder, procStart: String(Number(start) + 1) }) // same pid, another process
        const release = await acquireRunLock(root, { runId: 'r', waitMs: 0 })
        expect(await readHolder(runLockPath(root))).toMatchObject({ runId: 'r', pid: process.pid })
        await release()
      } finally {
        child.kill()
      }
    },
  )

  it('takes over a lock from another host only after its heartbeat is older than staleAfterMs', async () => {
    await writeLock({ pid: 1, hostname: 'cold-store-07', startedAt: '2026-01-01T00:00:00.000Z', runId: 'remote' })
    const err = await acquireRunLock(root, { runId: 'r', waitMs: 30, pollMs: 10 }).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_LOCKED' })
    expect((err as Error).message).toMatch(/pid 1 on cold-store-07/)
    const old = new Date(Date.now() - 60_000)
    await utimes(runLockPath(root), old, old)
    const release = await acquireRunLock(root, { runId: 'r', waitMs: 0, staleAfterMs: 30_000 })
    expect(await readHolder(runLockPath(root))).toMatchObject({ runId: 'r' })
    await release()
  })

  it('keeps refreshing the lock mtime while held', async () => {
    const release = await acquireRunLock(root, { runId: 'r', waitMs: 0, heartbeatMs: 10 })
    const old = new Date(Date.now() - 60_000)
    await utimes(runLockPath(root), old, old)
    let mtimeMs = old.getTime()
    for (let i = 0; i < 200 && mtimeMs <= old.getTime() + 1000; i++) {
      await new Promise((r) => setTimeout(r, 10))
      mtimeMs = (await stat(runLockPath(root))).mtimeMs
    }
    expect(mtimeMs).toBeGreaterThan(old.getTime() + 1000)
    await release()
  })

  it('leaves a lock that is no longer ours on release', async () => {
    const release = await acquireRunLock(root, { runId: 'mine', waitMs: 0 })
    const other = { pid: process.pid, hostname: hostname(), startedAt: '2026-01-01T00:00:00.000Z', runId: 'other' }
    await writeLock(other)
    await release()
    expect(await readHolder(runLockPath(root))).toEqual(other)
  })

  it('lets exactly one of several racing processes hold the lock at a time', async () => {
    expectNoOverlap(await race(3, 2), 3, 2)
  })

  it('lets exactly one of several processes take over a dead holder lock at a time', async () => {
    const pid = await deadPid()
    await writeLock({ pid, hostname: hostname(), startedAt: '2026-01-01T00:00:00.000Z', runId: 'killed' })
    expectNoOverlap(await race(4, 1), 4, 1)
    expect(await readHolder(runLockPath(root))).toBe('gone')
  })
})
