/**
 * Issue #4, check 6: the exit codes of style.md 4.3, by spawning the built CLI — 64 bad invocation, 78 invalid
 * config, 66 missing input, 65 malformed input, 0 success, 1 with --fail-on-shift when shifts were found. Each
 * failure names what is wrong and how to fix it in its last log line, and leaves nothing half-written: the tables,
 * ledger and state of a previously committed root are unchanged, and a fresh root gets no table file.
 */
import { cp, mkdir, mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { parseConfigText } from '../../src/config/load.js'
import { fleetBends } from '../../src/demo/fleet.js'
import { writeDemoLake } from '../../src/demo/write.js'
import { ExitCode } from '../../src/errors.js'
import { type CliResult, describeResult, hasBuiltCli, noCliReason, projectRoot, runCli } from '../helpers/cli.js'
import {
  dayFilePath,
  dayRows,
  jobConfig,
  listFiles,
  readOutputs,
  strayTemps,
  tableFiles,
  writeDay,
  writeJobConfig,
  writeRowsParquet,
} from '../helpers/lake.js'

let base: string
let lake: string
/** A root with one committed run over `lake` (days 0–2); failure cases run on copies of it. */
let committed: string

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-exit-'))
  lake = path.join(base, 'lake')
  committed = path.join(base, 'committed')
  for (let day = 0; day < 3; day++) await writeDay(lake, day)
  if (!hasBuiltCli) return
  const config = await writeJobConfig(path.join(base, 'committed.json'), { paths: [lake], root: committed })
  const r = await runCli(['run', '--config', config, '--json'])
  expect(r.code, describeResult(r)).toBe(0)
}, 120_000)
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

let caseNo = 0

/** Everything below a root that a failed run must leave as it was: table files, ledger, partials. */
async function stateOf(root: string): Promise<{ tables: unknown; ledger: string | null; partials: unknown }> {
  return {
    tables: await tableFiles(root),
    ledger: await readFile(path.join(root, '_state', 'ledger.json'), 'utf8').catch(() => null),
    partials: (await listFiles(path.join(root, '_state', 'partials'))).map((f) => [f.path, f.sha256]),
  }
}

/**
 * Runs `run --json` with a config over the good lake plus `extraPaths`, on a copy of the committed root; checks
 * the exit code and that the root is unchanged and unlocked, and returns the result.
 */
async function failingRun(
  expected: number,
  extraPaths: readonly string[],
  extra: Readonly<Record<string, unknown>> = {},
): Promise<CliResult> {
  const root = path.join(base, `case-${++caseNo}`)
  await cp(committed, root, { recursive: true })
  const before = await stateOf(root)
  const config = path.join(base, `case-${caseNo}.json`)
  const raw = jobConfig({ paths: [lake, ...extraPaths], root })
  await writeFile(config, JSON.stringify({ ...raw, ...extra }))
  const r = await runCli(['run', '--config', config, '--json'])
  expect(r.code, describeResult(r)).toBe(expected)
  expect(r.summary, 'no summary on stdout after a failure').toBeNull()
  expect(await stateOf(root)).toEqual(before)
  expect(await strayTemps(root)).toEqual([])
  expect(await readdir(path.join(root, '_state', 'staging')).catch(() => [])).toEqual([])
  expect((await readdir(path.join(root, '_state'))).filter((n) => n.startsWith('run.lock'))).toEqual([])
  return r
}

/** A folder holding one file, for the cases that add a bad file to the dataset. */
async function badDir(): Promise<string> {
  const dir = path.join(base, `bad-${++caseNo}`)
  await mkdir(dir, { recursive: true })
  return dir
}

function lastMessage(r: CliResult): string {
  return String(r.lastLog?.msg ?? '')
}

describe.skipIf(!hasBuiltCli)(`slopeshift exit codes (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('exits 64 on an unknown command', async () => {
    const r = await runCli(['frobnicate'])
    expect(r.code, describeResult(r)).toBe(ExitCode.usage)
    expect(r.lastLog?.code).toBe('SLOPESHIFT_USAGE')
    expect(lastMessage(r)).toMatch(/frobnicate/)
  })

  it('exits 64 on an unknown flag and writes nothing', async () => {
    const root = path.join(base, 'usage-root')
    const config = await writeJobConfig(path.join(base, 'usage.json'), { paths: [lake], root })
    const r = await runCli(['run', '--config', config, '--bogus-flag'])
    expect(r.code, describeResult(r)).toBe(ExitCode.usage)
    expect(lastMessage(r)).toMatch(/bogus-flag/)
    expect(await listFiles(root)).toEqual([])
  })

  it('exits 64 when --from is given without --to', async () => {
    const config = await writeJobConfig(path.join(base, 'usage-range.json'), {
      paths: [lake],
      root: path.join(base, 'usage-range'),
    })
    const r = await runCli(['run', '--config', config, '--from', '2026-11-02T00:00:00Z'])
    expect(r.code, describeResult(r)).toBe(ExitCode.usage)
    expect(lastMessage(r)).toMatch(/--from and --to/)
  })

  it('exits 78 on an invalid config and names the key', async () => {
    const root = path.join(base, 'config-root')
    const config = path.join(base, 'bad-config.json')
    const raw = jobConfig({ paths: [lake], root })
    await writeFile(config, JSON.stringify({ ...raw, window: { size: 'fortnightly', xUnit: 'hour' } }))
    const r = await runCli(['run', '--config', config, '--json'])
    expect(r.code, describeResult(r)).toBe(ExitCode.config)
    expect(r.lastLog?.code).toBe('SLOPESHIFT_CONFIG')
    expect(lastMessage(r)).toMatch(/window\.size/)
    expect(lastMessage(r)).toMatch(/15m, 6h, 1d/)
    expect(await listFiles(root)).toEqual([])
  })

  it('exits 78 on an unknown config key and names it', async () => {
    const root = path.join(base, 'config-root-2')
    const config = path.join(base, 'bad-config-2.yaml')
    const raw = jobConfig({ paths: [lake], root })
    await writeFile(config, JSON.stringify({ ...raw, detect: { minAbsChange: 0.01, fdrQq: 0.1 } }))
    const r = await runCli(['run', '--config', config, '--json'])
    expect(r.code, describeResult(r)).toBe(ExitCode.config)
    expect(lastMessage(r)).toMatch(/fdrQq/)
    expect(lastMessage(r)).toMatch(/detect/)
    expect(await listFiles(root)).toEqual([])
  })

  it('exits 66 when a source path is missing and names it and the config key', async () => {
    const missing = path.join(base, 'no-such-folder')
    const r = await failingRun(ExitCode.noInput, [missing])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_NO_INPUT')
    expect(lastMessage(r)).toContain(missing)
    expect(lastMessage(r)).toMatch(/source\.paths/)
  })

  it('exits 66 when a file lacks the y column and names the file, the column and the fix', async () => {
    const dir = await badDir()
    const file = path.join(dir, 'no-power.parquet')
    await writeRowsParquet(file, dayRows(3))
    // Rename the y column: a producer wrote `power` instead of `power_kw`.
    const renamed = path.join(dir, 'renamed.parquet')
    const { DuckDBInstance } = await import('@duckdb/node-api')
    const db = await DuckDBInstance.create(':memory:')
    const con = await db.connect()
    await con.run(
      `COPY (SELECT site, unit, ts, power_kw AS power FROM read_parquet('${file}')) TO '${renamed}' (FORMAT parquet)`,
    )
    con.closeSync()
    db.closeSync()
    await rm(file)
    const r = await failingRun(ExitCode.noInput, [dir])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_NO_INPUT')
    expect(lastMessage(r)).toContain(renamed)
    expect(lastMessage(r)).toMatch(/power_kw/)
    expect(lastMessage(r)).toMatch(/source\.y\.column|y\.column/)
  })

  it('exits 65 on a truncated Parquet file and names it', async () => {
    const dir = await badDir()
    const file = path.join(dir, 'truncated.parquet')
    const bytes = await readFile(dayFilePath(lake, 0))
    await writeFile(file, bytes.subarray(0, Math.floor(bytes.length / 2)))
    const r = await failingRun(ExitCode.dataErr, [dir])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_DATA')
    expect(lastMessage(r)).toContain(file)
  })

  it('exits 65 on a corrupt Parquet file (garbage between valid magic bytes) and names it', async () => {
    const dir = await badDir()
    const file = path.join(dir, 'corrupt.parquet')
    const bytes = Buffer.from(await readFile(dayFilePath(lake, 1)))
    for (let i = 8; i < bytes.length - 8; i++) bytes[i] = (i * 131) & 0xff
    await writeFile(file, bytes)
    const r = await failingRun(ExitCode.dataErr, [dir])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_DATA')
    expect(lastMessage(r)).toContain(file)
  })

  it('exits 65 when the y column has the wrong type and names the file and the column', async () => {
    const dir = await badDir()
    const file = path.join(dir, 'text-power.parquet')
    const src = path.join(dir, 'src.parquet.txt')
    await writeRowsParquet(src, dayRows(3))
    const { DuckDBInstance } = await import('@duckdb/node-api')
    const db = await DuckDBInstance.create(':memory:')
    const con = await db.connect()
    await con.run(
      `COPY (SELECT site, unit, ts, CAST(power_kw AS VARCHAR) AS power_kw FROM read_parquet('${src}'))
       TO '${file}' (FORMAT parquet)`,
    )
    con.closeSync()
    db.closeSync()
    await rm(src)
    const r = await failingRun(ExitCode.dataErr, [dir])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_DATA')
    expect(lastMessage(r)).toContain(file)
    expect(lastMessage(r)).toMatch(/power_kw/)
  })

  it('exits 65 when a file named in source.paths is not Parquet or Arrow', async () => {
    const dir = await badDir()
    const file = path.join(dir, 'notes.txt')
    await writeFile(file, 'compressor maintenance notes\n')
    const r = await failingRun(ExitCode.dataErr, [file])
    expect(r.lastLog?.code).toBe('SLOPESHIFT_DATA')
    expect(lastMessage(r)).toContain(file)
    expect(lastMessage(r)).toMatch(/source\.paths/)
  })

  describe('on the demo lake', () => {
    let demoConfig: string
    let demoRoot: string
    beforeAll(async () => {
      const dir = path.join(base, 'demo')
      await writeDemoLake(path.join(dir, 'lake'))
      const demoYaml = path.join(projectRoot, 'config', 'demo.yaml')
      const raw = parseConfigText(await readFile(demoYaml, 'utf8'), demoYaml) as Record<string, unknown>
      const source = raw.source as Record<string, unknown>
      demoRoot = path.join(dir, 'tables')
      demoConfig = path.join(dir, 'demo.json')
      await writeFile(
        demoConfig,
        JSON.stringify({
          ...raw,
          source: { ...source, paths: [path.join(dir, 'lake', 'parquet'), path.join(dir, 'lake', 'arrow')] },
          output: { ...(raw.output as object), root: demoRoot },
        }),
      )
    }, 120_000)

    it('exits 1 with --fail-on-shift when the run finds shifts, after committing them', async () => {
      const r = await runCli(['run', '--config', demoConfig, '--json', '--fail-on-shift'])
      expect(r.code, describeResult(r)).toBe(1)
      const bends = fleetBends()
      expect(r.summary?.shifts).toBe(bends.length)
      const { shifts } = await readOutputs(demoRoot)
      const found = shifts
        .filter((s) => s.verdict === 'shift')
        .map((s) => [...(s.key as string[]), s.window_start])
        .sort()
      const day = 86_400_000
      const expected = bends.map((b) => [b.site, b.unit, Math.floor(b.bendMs / day) * day]).sort()
      expect(found).toEqual(expected)
    })

    it('exits 0 when the rerun finds nothing new, even with --fail-on-shift', async () => {
      const r = await runCli(['run', '--config', demoConfig, '--json', '--fail-on-shift'])
      expect(r.code, describeResult(r)).toBe(0)
      expect(r.summary?.files.read).toBe(0)
      expect(r.summary?.shifts).toBe(0)
    })

    it('exits 0 when shifts are found without --fail-on-shift', async () => {
      const r = await runCli(['run', '--config', demoConfig, '--json', '--full'])
      expect(r.code, describeResult(r)).toBe(0)
      expect(r.summary?.shifts).toBe(fleetBends().length)
    })
  })
})
