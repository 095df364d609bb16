import { existsSync } from 'node:fs'
import { mkdir, mkdtemp, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { pathToFileURL } from 'node:url'
import { describe, expect, it } from 'vitest'
import { discoverFiles, hiveSegments, splitGlob } from '../../src/dataset/discover.js'

async function lake(): Promise<string> {
  const root = await mkdtemp(path.join(tmpdir(), 'slopeshift-discover-'))
  const put = async (rel: string, bytes: string) => {
    await mkdir(path.dirname(path.join(root, rel)), { recursive: true })
    await writeFile(path.join(root, rel), bytes, 'latin1')
  }
  await put('region=eu/day=2026-11-01/part-0.parquet', 'PAR1....PAR1')
  await put('region=eu/day=2026-11-02/part-0.parquet', 'PAR1....PAR1')
  await put('region=us/day=2026-11-01/a.arrow', 'ARROW1\0\0')
  await put('stream/latest.arrows', '\xff\xff\xff\xff....')
  await put('stream/no-extension', 'PAR1....PAR1')
  await put('region=eu/_SUCCESS', '')
  await put('notes.txt', 'hello')
  await put('_state/ledger.json', '{}')
  return root
}

describe('discoverFiles', () => {
  it('walks folders, detects kinds by extension and magic bytes, and reads Hive segments', async () => {
    const root = await lake()
    const { files, ignored } = await discoverFiles([root])
    expect(files.map((f) => [path.relative(root, f.path), f.kind])).toEqual([
      ['region=eu/day=2026-11-01/part-0.parquet', 'parquet'],
      ['region=eu/day=2026-11-02/part-0.parquet', 'parquet'],
      ['region=us/day=2026-11-01/a.arrow', 'arrow-file'],
      ['stream/latest.arrows', 'arrow-stream'],
      ['stream/no-extension', 'parquet'],
    ])
    expect(files[0]?.hive).toEqual({ region: 'eu', day: '2026-11-01' })
    expect(ignored.map((i) => path.relative(root, i.path)).sort()).toEqual(['notes.txt', 'region=eu/_SUCCESS'])
  })

  it('matches globs below their fixed prefix', async () => {
    const root = await lake()
    const { files } = await discoverFiles([path.join(root, '**/day=2026-11-01/*')])
    expect(files.map((f) => path.relative(root, f.path))).toEqual([
      'region=eu/day=2026-11-01/part-0.parquet',
      'region=us/day=2026-11-01/a.arrow',
    ])
  })

  it('rejects an explicitly named file that is neither Parquet nor Arrow, naming the file and the fix', async () => {
    const root = await lake()
    await expect(discoverFiles([path.join(root, 'notes.txt')])).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      exitCode: 65,
      message: expect.stringMatching(/notes\.txt is not a Parquet or Arrow IPC file.*list only \.parquet/),
    })
  })

  it('reports a missing input path with exit code 66', async () => {
    await expect(discoverFiles(['/nonexistent/lake'])).rejects.toMatchObject({
      code: 'SLOPESHIFT_NO_INPUT',
      exitCode: 66,
    })
  })

  it('never enters excluded folders such as the output root', async () => {
    const root = await lake()
    const { files } = await discoverFiles([root], { exclude: [path.join(root, 'region=eu')] })
    expect(files.every((f) => !f.path.includes('region=eu'))).toBe(true)
  })
})

describe('hiveSegments', () => {
  it('decodes percent-escaped values', () => {
    expect(hiveSegments('/lake/site=north%20pier/x.parquet', '/lake')).toEqual({ site: 'north pier' })
  })
})

describe('splitGlob', () => {
  it('keeps the fixed prefix as the walk root', () => {
    const { root, pattern } = splitGlob('/lake/a/**/*.parquet')
    expect(root).toBe('/lake/a')
    expect(pattern.test('/lake/a/x.parquet')).toBe(true)
    expect(pattern.test('/lake/a/b/c/x.parquet')).toBe(true)
    expect(pattern.test('/lake/a/b/x.arrow')).toBe(false)
  })
})

// The worker path needs the built worker script (dist/); from TypeScript sources it falls back to this thread.
const builtThread = path.join(import.meta.dirname, '..', '..', 'dist', 'dataset', 'discover-thread.js')
const hasBuiltThread = existsSync(builtThread)

describe.skipIf(!hasBuiltThread)(
  `discoverInWorker (${hasBuiltThread ? 'built' : `${builtThread} missing: run npm run build`})`,
  () => {
    type Thread = typeof import('../../src/dataset/discover-thread.js')
    const load = async (): Promise<Thread> => (await import(pathToFileURL(builtThread).href)) as Thread

    it('runs in a worker and finds exactly what discoverFiles finds', async () => {
      const { discoverInWorker, discoverWorkerScript } = await load()
      expect(discoverWorkerScript()).toMatch(/discover-worker\.js$/)
      const root = await lake()
      const options = { exclude: [path.join(root, '_state')] }
      expect(await discoverInWorker([root], options)).toEqual(await discoverFiles([root], options))
    })

    it('rejects with the same error classes, codes and messages', async () => {
      const { discoverInWorker } = await load()
      const root = await lake()
      const missing = path.join(root, 'no-such-folder')
      const fromWorker = await discoverInWorker([missing]).catch((e: unknown) => e)
      const here = await discoverFiles([missing]).catch((e: unknown) => e)
      expect(fromWorker).toMatchObject({ code: 'SLOPESHIFT_NO_INPUT', exitCode: 66, message: (here as Error).message })
      const notData = await discoverInWorker([path.join(root, 'notes.txt')]).catch((e: unknown) => e)
      expect(notData).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
      expect((notData as Error).message).toMatch(/notes\.txt is not a Parquet or Arrow IPC file/)
    })
  },
)
