/**
 * Issue #4, check 4: two runs on one output root. Exactly one does the work; the other exits 75 (EX_TEMPFAIL,
 * "retry later") with `--lock-wait 0`, or waits for the lock and then finds nothing to do. To make the overlap
 * certain, the first run is paused with SIGSTOP once it holds the lock (it logged "run started") and resumed
 * with SIGCONT after the second run has tried or is waiting; a paused process is alive, so its lock is not stale.
 */
import { mkdtemp, readdir, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { ExitCode } from '../../src/errors.js'
import { readLedger } from '../../src/store/ledger.js'
import { describeResult, hasBuiltCli, noCliReason, runCli, spawnCli } from '../helpers/cli.js'
import { readOutputs, tableFiles, writeDay, writeJobConfig } from '../helpers/lake.js'

const days = 3
let base: string
let lake: string

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-concurrent-'))
  lake = path.join(base, 'lake')
  for (let day = 0; day < days; day++) await writeDay(lake, day)
})
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

async function until(check: () => Promise<boolean>, timeoutMs: number): Promise<boolean> {
  const deadline = Date.now() + timeoutMs
  while (Date.now() < deadline) {
    if (await check()) return true
    await new Promise((resolve) => setTimeout(resolve, 20))
  }
  return false
}

/** Starts a run on `config` and pauses it (SIGSTOP) once it holds the lock (it logged "run started"). */
async function pausedHolder(config: string): Promise<ReturnType<typeof spawnCli>> {
  const first = spawnCli(['run', '--config', config, '--json'])
  expect(await first.waitForLog('"run started"')).toBe(true)
  first.child.kill('SIGSTOP')
  return first
}

/** True once the run with `pid` waits for the lock of `root`: it keeps its candidate lock file `run.lock.<pid>-<random>.tmp` while it polls. */
function waitingForLock(root: string, pid: number | undefined): Promise<boolean> {
  return until(
    async () =>
      (await readdir(path.join(root, '_state'))).some((n) => n.startsWith(`run.lock.${pid}-`) && n.endsWith('.tmp')),
    30_000,
  )
}

/**
 * A first run of `config` paused while it holds the lock of `root`, and a second one waiting for it (`--lock-wait 60`);
 * `meanwhile` runs once the second waits, then the first resumes.
 */
async function holderAndWaiter(
  config: string,
  root: string,
  meanwhile: () => Promise<void> = async () => undefined,
): Promise<{ first: ReturnType<typeof spawnCli>; second: ReturnType<typeof spawnCli> }> {
  const first = await pausedHolder(config)
  const second = spawnCli(['run', '--config', config, '--json', '--lock-wait', '60'])
  try {
    expect(await waitingForLock(root, second.child.pid), 'second run never started waiting for the lock').toBe(true)
    await meanwhile()
  } finally {
    first.child.kill('SIGCONT')
  }
  return { first, second }
}

describe.skipIf(!hasBuiltCli)(`run lock between two CLI runs (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('exits 75 and names the holder when another run holds the lock and --lock-wait is 0', async () => {
    const root = path.join(base, 'no-wait')
    const config = await writeJobConfig(path.join(base, 'no-wait.json'), { paths: [lake], root })
    const first = await pausedHolder(config)
    let second: Awaited<ReturnType<typeof runCli>>
    try {
      second = await runCli(['run', '--config', config, '--json', '--lock-wait', '0'])
    } finally {
      first.child.kill('SIGCONT')
    }
    const done = await first.result
    expect(done.code, describeResult(done)).toBe(0)
    expect(done.summary?.files.read).toBe(days)
    expect(second.code, describeResult(second)).toBe(ExitCode.tempFail)
    expect(second.lastLog?.code).toBe('SLOPESHIFT_LOCKED')
    expect(String(second.lastLog?.msg)).toContain(`pid ${first.child.pid}`)
    expect(String(second.lastLog?.msg)).toMatch(/retry later/i)
    expect(second.summary).toBeNull()
    // Only the first run is recorded and committed.
    const { runs } = await readOutputs(root)
    expect(runs.map((r) => r.run_id)).toEqual([done.summary?.run_id])
    expect((await readLedger(root)).committedRunId).toBe(done.summary?.run_id)
  })

  it('waits with --lock-wait, then finds nothing to do', async () => {
    const root = path.join(base, 'wait')
    const config = await writeJobConfig(path.join(base, 'wait.json'), { paths: [lake], root })
    const { first, second } = await holderAndWaiter(config, root)
    const done = await first.result
    expect(done.code, describeResult(done)).toBe(0)
    expect(done.summary?.files.read).toBe(days)
    const tablesAfterFirst = await tableFiles(root)
    const waited = await second.result
    expect(waited.code, describeResult(waited)).toBe(0)
    expect(waited.summary?.files).toMatchObject({ read: 0, new: 0, changed: 0, skipped: days })
    expect(waited.summary?.rows.read).toBe(0)
    // The waiter ran after the first one ended (its started_at is taken before the lock wait) and rewrote no table file.
    expect(Date.parse(waited.summary?.ended_at ?? '')).toBeGreaterThanOrEqual(Date.parse(done.summary?.ended_at ?? ''))
    expect(await tableFiles(root)).toEqual(tablesAfterFirst)
    const { runs } = await readOutputs(root)
    expect(runs.map((r) => r.run_id)).toEqual([done.summary?.run_id, waited.summary?.run_id])
  })

  it('lists the inputs again after waiting for the lock, so a file added meanwhile is read', async () => {
    const ownLake = path.join(base, 'late-lake')
    for (let day = 0; day < days; day++) await writeDay(ownLake, day)
    const root = path.join(base, 'wait-late')
    const config = await writeJobConfig(path.join(base, 'wait-late.json'), { paths: [ownLake], root })
    // The waiter's entry lists the lake before it waits (early discovery); the day added meanwhile is not in it.
    const { first, second } = await holderAndWaiter(config, root, async () => {
      await writeDay(ownLake, days)
      await new Promise((resolve) => setTimeout(resolve, 1200)) // past the wait after which a listing is stale
    })
    const done = await first.result
    expect(done.code, describeResult(done)).toBe(0)
    const waited = await second.result
    expect(waited.code, describeResult(waited)).toBe(0)
    expect(done.summary?.files.read).toBeGreaterThanOrEqual(days)
    // Whatever the first run saw, the waiter saw the lake as it was after the wait: nothing is left unread.
    expect((done.summary?.files.read ?? 0) + (waited.summary?.files.read ?? 0)).toBe(days + 1)
    expect((await readLedger(root)).files.length).toBe(days + 1)
  })

  it('lets exactly one of two runs started together do the work', async () => {
    const root = path.join(base, 'together')
    const config = await writeJobConfig(path.join(base, 'together.json'), { paths: [lake], root })
    const results = await Promise.all([
      runCli(['run', '--config', config, '--json']),
      runCli(['run', '--config', config, '--json']),
    ])
    for (const r of results) expect([0, ExitCode.tempFail], describeResult(r)).toContain(r.code)
    const worked = results.filter((r) => r.code === 0 && r.summary?.files.read === days)
    const other = results.filter((r) => !worked.includes(r))
    expect(worked.length).toBe(1)
    expect(other.length).toBe(1)
    const o = other[0]
    // The other one either hit the lock (75) or ran after the first and found nothing.
    if (o?.code === 0) expect(o.summary?.files.read).toBe(0)
    else expect(o?.lastLog?.code).toBe('SLOPESHIFT_LOCKED')
    const { fits } = await readOutputs(root)
    expect(fits.length).toBe(6 * days)
  })
})
