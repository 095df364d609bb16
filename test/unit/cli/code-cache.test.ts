import { mkdtemp, readdir, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import vm from 'node:vm'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { codeCacheDir, codeCacheName, commandOf, readCodeCache, writeCodeCache } from '../../../src/cli/code-cache.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-code-cache-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

const runtime = { version: 'v20.20.2', arch: 'x64', flags: '' }
const source = 'function add(a, b) { return a + b }\nadd(1, 2)\n'

describe('codeCacheDir', () => {
  it('uses cache/ beside the bundle when SLOPESHIFT_CODE_CACHE is unset or empty', () => {
    expect(codeCacheDir({}, '/opt/slopeshift/dist/bundle')).toBe('/opt/slopeshift/dist/bundle/cache')
    expect(codeCacheDir({ SLOPESHIFT_CODE_CACHE: '' }, '/b')).toBe('/b/cache')
  })

  it('turns the cache off with off, 0 or false', () => {
    for (const v of ['off', 'OFF', '0', 'false']) expect(codeCacheDir({ SLOPESHIFT_CODE_CACHE: v }, '/b')).toBeNull()
  })

  it('uses the folder SLOPESHIFT_CODE_CACHE names, made absolute', () => {
    expect(codeCacheDir({ SLOPESHIFT_CODE_CACHE: '/var/cache/slopeshift' }, '/b')).toBe('/var/cache/slopeshift')
    expect(codeCacheDir({ SLOPESHIFT_CODE_CACHE: 'rel' }, '/b')).toBe(path.resolve('rel'))
  })
})

describe('commandOf', () => {
  it('returns the command named anywhere in argv, or cli for help and version', () => {
    expect(commandOf(['run', '--config', 'job.yaml'])).toBe('run')
    expect(commandOf(['--json', 'check-config', '--config', 'x.yaml'])).toBe('check-config')
    expect(commandOf(['--version'])).toBe('cli')
    expect(commandOf(['--help'])).toBe('cli')
    expect(commandOf(['bogus'])).toBe('cli')
  })
})

describe('codeCacheName', () => {
  it('differs when the bundle, command, Node version, architecture or flags differ', () => {
    const base = codeCacheName('0123abcd', 'run', runtime)
    const others = [
      codeCacheName('0123abce', 'run', runtime),
      codeCacheName('0123abcd', 'demo', runtime),
      codeCacheName('0123abcd', 'run', { ...runtime, version: 'v20.19.0' }),
      codeCacheName('0123abcd', 'run', { ...runtime, arch: 'arm64' }),
      codeCacheName('0123abcd', 'run', { ...runtime, flags: '--max-old-space-size=4096' }),
    ]
    expect(new Set([base, ...others]).size).toBe(6)
    expect(base).toMatch(/^0123abcd-run-v20\.20\.2-x64-[0-9a-f]{8}\.v8cache$/)
  })
})

describe('writeCodeCache', () => {
  it('writes a cache that V8 accepts for the same source and rejects for another source', async () => {
    const file = path.join(dir, 'nested', 'a.v8cache')
    const script = new vm.Script(source, { filename: 'a.js' })
    script.runInThisContext()
    writeCodeCache(script, file)
    const data = readCodeCache(file)
    expect(data?.length).toBeGreaterThan(0)
    expect(new vm.Script(source, { filename: 'a.js', cachedData: data }).cachedDataRejected).toBe(false)
    const other = `${source}add(3, 4)\n`
    expect(new vm.Script(other, { filename: 'a.js', cachedData: data }).cachedDataRejected).toBe(true)
    expect((await readdir(path.dirname(file))).filter((f) => f.includes('.tmp-'))).toEqual([])
  })

  it('leaves nothing behind and does not throw when the folder cannot be created', async () => {
    const blocker = path.join(dir, 'a-file')
    await writeFile(blocker, 'not a folder')
    const script = new vm.Script(source, { filename: 'b.js' })
    expect(() => writeCodeCache(script, path.join(blocker, 'sub', 'b.v8cache'))).not.toThrow()
    expect(readCodeCache(path.join(blocker, 'sub', 'b.v8cache'))).toBeUndefined()
  })
})

describe('readCodeCache', () => {
  it('returns undefined when there is no cache file', () => {
    expect(readCodeCache(path.join(dir, 'missing.v8cache'))).toBeUndefined()
  })
})
