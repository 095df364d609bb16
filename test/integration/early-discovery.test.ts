/**
 * Early discovery (src/dataset/early-discovery.ts): the CLI entry lists a run's inputs in the discovery worker
 * from a quick read of the config, and the run uses that listing only when it names exactly the validated
 * config's inputs. Real worker threads on a small invented lake, and the built CLI spawned.
 */
import { execFileSync } from 'node:child_process'
import { existsSync } from 'node:fs'
import { mkdtemp, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { pathToFileURL } from 'node:url'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { discoverFiles } from '../../src/dataset/discover.js'
import { guessFromConfigFile } from '../../src/dataset/discovery-guess.js'
import { describeResult, hasBuiltCli, noCliReason, projectRoot, runCli } from '../helpers/cli.js'
import { jobConfig, readOutputs, writeDay, writeJobConfig } from '../helpers/lake.js'

let base: string
let lake: string
let config: string
beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-early-'))
  lake = path.join(base, 'lake')
  for (let day = 0; day < 3; day++) await writeDay(lake, day)
  config = await writeJobConfig(path.join(base, 'job.json'), { paths: [lake], root: path.join(base, 'out') })
})
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

// The worker runs the built script (dist/); from TypeScript sources there is none.
const builtEarly = path.join(projectRoot, 'dist', 'dataset', 'early-discovery.js')
const workerScript = path.join(projectRoot, 'dist', 'dataset', 'discover-worker.js')
const hasBuilt = existsSync(builtEarly) && existsSync(workerScript)

describe.skipIf(!hasBuilt)(
  `startEarlyDiscovery / takeEarlyDiscovery (${hasBuilt ? 'built' : 'run npm run build'})`,
  () => {
    type Early = typeof import('../../src/dataset/early-discovery.js')
    const load = async (): Promise<Early> => (await import(pathToFileURL(builtEarly).href)) as Early
    const expected = () => ({ inputs: [lake], options: { format: 'auto' as const, exclude: [path.join(base, 'out')] } })

    it('lists the inputs a run config names, exactly as discoverFiles does', async () => {
      const early = await load()
      early.startEarlyDiscovery(['run', '--config', config, '--json'], workerScript)
      const found = await early.takeEarlyDiscovery(config, expected())
      const direct = await discoverFiles(expected().inputs, expected().options)
      expect(found).toEqual(direct)
      expect(found?.files.length).toBe(3)
    })

    it('reads --config=F too, and gives null when the validated inputs differ from the guess', async () => {
      const early = await load()
      early.startEarlyDiscovery(['run', `--config=${config}`], workerScript)
      const other = { ...expected(), options: { format: 'parquet' as const, exclude: [path.join(base, 'out')] } }
      expect(await early.takeEarlyDiscovery(config, other)).toBeNull()
    })

    it('starts nothing for other commands, and hands a listing to its own config file only', async () => {
      const early = await load()
      early.startEarlyDiscovery(['check-config', '--config', config], workerScript)
      expect(early.takeEarlyDiscovery(config, expected())).toBeNull()
      early.startEarlyDiscovery(['run', '--config', config], workerScript)
      expect(early.takeEarlyDiscovery(path.join(base, 'another.json'), expected())).toBeNull()
      // Taken (and stopped) by the call above: nothing is left for a second taker.
      expect(early.takeEarlyDiscovery(config, expected())).toBeNull()
    })
  },
)

describe.skipIf(!hasBuiltCli)(`run with early discovery via the CLI (${hasBuiltCli ? 'built' : noCliReason})`, () => {
  it('uses the early listing of a YAML config with ${ENV} paths, and gives the tables of a plain run', async () => {
    const yamlConfig = path.join(base, 'job-env.yaml')
    const raw = jobConfig({ paths: ['${EARLY_LAKE}'], root: '${EARLY_OUT:-out-yaml}', job: 'early-yaml' })
    await writeFile(yamlConfig, JSON.stringify(raw)) // JSON is YAML
    const env = { EARLY_LAKE: lake, SLOPESHIFT_LOG_LEVEL: 'debug' }
    const viaEarly = await runCli(['run', '--config', yamlConfig, '--json'], { env })
    expect(viaEarly.code, describeResult(viaEarly)).toBe(0)
    expect(viaEarly.logs.find((l) => l.msg === 'early input listing checked')).toMatchObject({ used: true })
    expect(viaEarly.summary?.files.read).toBe(3)

    // The same job from a JSON config whose root is elsewhere: same tables.
    const plain = await runCli(['run', '--config', config, '--json'])
    expect(plain.code, describeResult(plain)).toBe(0)
    const a = await readOutputs(path.join(base, 'out-yaml'))
    const b = await readOutputs(path.join(base, 'out'))
    expect(a.fits).toEqual(b.fits)
    expect(a.shifts).toEqual(b.shifts)
  })
})

describe('guessFromConfigFile', () => {
  it('guesses from a regular config file', async () => {
    expect(await guessFromConfigFile(config, {})).toEqual({
      inputs: [lake],
      options: { format: 'auto', exclude: [path.join(base, 'out')] },
    })
  })

  it.skipIf(process.platform === 'win32')('leaves a named pipe unread (its one read belongs to the run)', async () => {
    const fifo = path.join(base, 'job.fifo')
    execFileSync('mkfifo', [fifo])
    // Reading a FIFO that nobody writes would block here until the test times out.
    expect(await guessFromConfigFile(fifo, {})).toBeNull()
  })
})

describe.skipIf(!hasBuiltCli || process.platform === 'win32')(
  `run with its config in a named pipe via the CLI (${hasBuiltCli ? 'built' : noCliReason})`,
  () => {
    it('reads the config once, in the run: the early listing leaves the pipe alone', async () => {
      const fifo = path.join(base, 'piped-job.fifo')
      execFileSync('mkfifo', [fifo])
      const text = JSON.stringify(jobConfig({ paths: [lake], root: path.join(base, 'out-piped'), job: 'piped' }))
      const result = runCli(['run', '--config', fifo, '--json'])
      // Opening a FIFO for writing waits for its reader; a reader that took the text first would leave the run none.
      await writeFile(fifo, text)
      const r = await result
      expect(r.code, describeResult(r)).toBe(0)
      expect(r.summary?.job).toBe('piped')
      expect(r.summary?.files.read).toBe(3)
    })
  },
)
