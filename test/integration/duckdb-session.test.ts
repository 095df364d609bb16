import { existsSync } from 'node:fs'
import { mkdtemp } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { describe, expect, it } from 'vitest'
import { openDuckDb } from '../../src/dataset/duckdb.js'

describe('openDuckDb', () => {
  it('applies threads, memory limit, spill folder, the UTC session zone and no file cache', async () => {
    const spill = path.join(await mkdtemp(path.join(tmpdir(), 'slopeshift-duckdb-')), 'spill')
    const db = await openDuckDb({ threads: 1, memoryLimit: '256MB', tempDirectory: spill })
    try {
      const r = await db.run(
        "SELECT current_setting('threads'), current_setting('memory_limit'), current_setting('temp_directory'), current_setting('TimeZone'), current_setting('enable_external_file_cache')",
      )
      const [threads, memory, temp, zone, fileCache] = ((await r.getRowsJS())[0] ?? []) as unknown[]
      expect(fileCache).toBe(false)
      expect(Number(threads)).toBe(1)
      // DuckDB reports the limit in its own units (256MB → "244.1 MiB").
      expect(String(memory)).toBe('244.1 MiB')
      expect(temp).toBe(spill)
      expect(zone).toBe('UTC')
    } finally {
      db.close()
    }
  })

  it('opens further connections to the same instance, in UTC, closed with the session', async () => {
    const db = await openDuckDb({ threads: 1 })
    await db.run('CREATE TABLE shared AS SELECT 42 AS answer')
    const other = await db.connect()
    const r = await other.runAndReadAll("SELECT answer, current_setting('TimeZone') FROM shared")
    expect(r.getRowsJS()).toEqual([[42, 'UTC']])
    db.close()
    await expect(other.run('SELECT 1')).rejects.toThrow()
    await expect(db.connect()).rejects.toThrow('the DuckDB session is closed')
  })

  it('spills a sort larger than the memory limit into the given folder', async () => {
    const spill = path.join(await mkdtemp(path.join(tmpdir(), 'slopeshift-duckdb-')), 'spill')
    const db = await openDuckDb({ threads: 1, memoryLimit: '40MB', tempDirectory: spill })
    try {
      // 4 M rows of two 8-byte columns sorted: about 64 MB, more than the limit.
      const r = await db.run(
        'SELECT count(*) FROM (SELECT i, hash(i) AS h FROM range(4000000) t(i) ORDER BY h LIMIT 1000000 OFFSET 10)',
      )
      expect((await r.getRowsJS())[0]?.[0]).toBe(1_000_000n)
      expect(existsSync(spill)).toBe(true)
    } finally {
      db.close()
    }
  })

  it('refuses a thread count that is not a positive integer', async () => {
    await expect(openDuckDb({ threads: 0 })).rejects.toThrow('threads must be a positive integer, got 0')
  })
})
