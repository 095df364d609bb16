/**
 * The shipped entry's V8 code cache (src/cli/code-cache.ts, launch.ts), end to end on the built CLI: the
 * first successful command writes its cache file, later runs give the same output, a damaged cache is
 * rejected by V8 and rewritten, a failed command writes none, the cache can be turned off, and a bundle
 * from another build than its entry runs without one.
 */
import { spawnSync } from 'node:child_process'
import { copyFile, mkdir, mkdtemp, readdir, readFile, rm, stat, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { ExitCode } from '../../src/errors.js'
import { cliPath, describeResult, hasBuiltCli, noCliReason, projectRoot, runCli } from '../helpers/cli.js'

let base: string
beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-cli-cache-'))
})
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

const version = (JSON.parse(await readFile(path.join(projectRoot, 'package.json'), 'utf8')) as { version: string })
  .version

describe.skipIf(!hasBuiltCli)(`the built CLI's code cache${hasBuiltCli ? '' : ` (skipped: ${noCliReason})`}`, () => {
  it('writes one cache file per command after a successful run and gives the same output with it', async () => {
    const cache = path.join(base, 'ok')
    const first = await runCli(['--version'], { env: { SLOPESHIFT_CODE_CACHE: cache } })
    expect(first.code, describeResult(first)).toBe(0)
    expect(first.stdout.trim()).toBe(version)
    const files = await readdir(cache)
    expect(files).toHaveLength(1)
    expect(files[0]).toMatch(/-cli-v\d+\.\d+\.\d+-[a-z0-9]+-[0-9a-f]{8}\.v8cache$/)
    const written = (await stat(path.join(cache, files[0] as string))).mtimeMs
    const second = await runCli(['--version'], { env: { SLOPESHIFT_CODE_CACHE: cache } })
    expect(second.code, describeResult(second)).toBe(0)
    expect(second.stdout).toBe(first.stdout)
    // An accepted cache is not written again.
    expect((await stat(path.join(cache, files[0] as string))).mtimeMs).toBe(written)
    const check = await runCli(['check-config', '--config', 'config/demo.yaml'], {
      env: { SLOPESHIFT_CODE_CACHE: cache },
    })
    expect(check.code, describeResult(check)).toBe(0)
    expect((await readdir(cache)).filter((f) => f.includes('-check-config-'))).toHaveLength(1)
  })

  it('runs from source and rewrites the file when the cache is damaged', async () => {
    const cache = path.join(base, 'damaged')
    const first = await runCli(['--version'], { env: { SLOPESHIFT_CODE_CACHE: cache } })
    expect(first.code, describeResult(first)).toBe(0)
    const [name] = await readdir(cache)
    const file = path.join(cache, name as string)
    await writeFile(file, 'not a V8 code cache')
    const again = await runCli(['--version'], { env: { SLOPESHIFT_CODE_CACHE: cache } })
    expect(again.code, describeResult(again)).toBe(0)
    expect(again.stdout.trim()).toBe(version)
    expect((await stat(file)).size).toBeGreaterThan('not a V8 code cache'.length)
  })

  it('writes no cache for a failed command, and runs with the cache turned off', async () => {
    const cache = path.join(base, 'failed')
    const failed = await runCli(['check-config', '--config', path.join(base, 'missing.yaml')], {
      env: { SLOPESHIFT_CODE_CACHE: cache },
    })
    expect(failed.code, describeResult(failed)).toBe(ExitCode.config)
    expect(failed.lastLog?.msg).toMatch(/cannot read config file .*missing\.yaml/)
    await expect(readdir(cache)).rejects.toMatchObject({ code: 'ENOENT' })
    const off = await runCli(['--version'], { env: { SLOPESHIFT_CODE_CACHE: 'off' } })
    expect(off.code, describeResult(off)).toBe(0)
    expect(off.stdout.trim()).toBe(version)
  })

  it('runs without a cache when the bundle is not from the same build as the entry', async () => {
    const copy = path.join(base, 'copy')
    await mkdir(copy)
    await copyFile(cliPath, path.join(copy, 'slopeshift.js'))
    const bundle = await readFile(path.join(path.dirname(cliPath), 'cli.cjs'), 'latin1')
    expect(bundle).toMatch(/^\/\*slopeshift-bundle:[0-9a-f]{16}\*\//)
    const run = (cache: string) =>
      spawnSync(process.execPath, [path.join(copy, 'slopeshift.js'), '--version'], {
        cwd: projectRoot,
        encoding: 'utf8',
        env: { ...process.env, SLOPESHIFT_CODE_CACHE: cache },
      })
    // The unchanged copy writes its cache ...
    await writeFile(path.join(copy, 'cli.cjs'), bundle, 'latin1')
    const same = run(path.join(base, 'copy-same'))
    expect(same.status, same.stderr).toBe(0)
    expect(await readdir(path.join(base, 'copy-same'))).toHaveLength(1)
    // ... a bundle with another build's id runs the same, from source, and writes none.
    await writeFile(
      path.join(copy, 'cli.cjs'),
      bundle.replace(/^\/\*slopeshift-bundle:[0-9a-f]{16}/, '/*slopeshift-bundle:0000000000000000'),
      'latin1',
    )
    const other = run(path.join(base, 'copy-other'))
    expect(other.status, other.stderr).toBe(0)
    expect(other.stdout.trim()).toBe(version)
    await expect(readdir(path.join(base, 'copy-other'))).rejects.toMatchObject({ code: 'ENOENT' })
  })
})
