import { describe, expect, it } from 'vitest'
import { parseConfigText, resolveConfig } from '../../../src/config/load.js'
import { ConfigError } from '../../../src/errors.js'

const minimal = {
  source: { paths: ['lake'], keys: ['site'], x: { column: 'ts' }, y: { column: 'kw' } },
  window: { size: '1d' },
  output: { root: 'out' },
}

function problemsOf(raw: unknown, env: Record<string, string> = {}): ConfigError {
  try {
    resolveConfig(raw, '/etc/job.yaml', { env })
  } catch (err) {
    if (err instanceof ConfigError) return err
    throw err
  }
  throw new Error('expected a ConfigError')
}

describe('resolveConfig', () => {
  it('fills defaults and resolves relative paths from the config folder', () => {
    const c = resolveConfig(minimal, '/etc/slopeshift/job.yaml', { env: {} })
    expect(c.source.paths).toEqual(['/etc/slopeshift/lake'])
    expect(c.output.root).toBe('/etc/slopeshift/out')
    expect(c.window.timeZone).toBe('UTC')
    expect(c.window.xUnit).toBe('hour')
    expect(c.detect.fdrQ).toBe(0.05)
    expect(c.detect.minPoints).toBe(20)
    expect(c.engine.threads).toBe(2)
  })

  it('lists every problem at once, each with its key path', () => {
    const err = problemsOf({
      ...minimal,
      source: { ...minimal.source, keys: [], extra: 1 },
      window: { size: '5 days', timeZone: 'Mars/Base' },
    })
    expect(err.code).toBe('SLOPESHIFT_CONFIG')
    expect(err.exitCode).toBe(78)
    expect(err.message).toMatch(/has 4 problem/)
    expect(err.message).toMatch(/→ at source\.keys/)
    expect(err.message).toMatch(/Unrecognized key: "extra"/)
    expect(err.message).toMatch(/→ at window\.size/)
    expect(err.message).toMatch(/must be an IANA time zone[\s\S]*→ at window\.timeZone/)
  })

  it('interpolates environment references and defaults', () => {
    const c = resolveConfig(
      {
        ...minimal,
        notify: { webhooks: [{ name: 'ops', url: '${HOOK_URL}', secret: '${HOOK_SECRET:-fallback}' }] },
      },
      '/etc/job.yaml',
      { env: { HOOK_URL: 'https://chat.example.test/hook' } },
    )
    expect(c.notify.webhooks[0]?.url).toBe('https://chat.example.test/hook')
    expect(c.notify.webhooks[0]?.secret).toBe('fallback')
  })

  it('names unset environment variables and where they are used', () => {
    const err = problemsOf({ ...minimal, notify: { webhooks: [{ name: 'ops', url: '${HOOK_URL}' }] } })
    expect(err.message).toMatch(/environment variable HOOK_URL is not set\n {2}→ at notify\.webhooks\.0\.url/)
  })

  it('applies command-line overrides over the file', () => {
    const c = resolveConfig(minimal, '/etc/job.yaml', {
      env: {},
      overrides: { 'engine.threads': 4, 'window.size': '6h' },
    })
    expect(c.engine.threads).toBe(4)
    expect(c.window.size).toBe('6h')
  })
})

describe('parseConfigText', () => {
  it('reports the line of a YAML syntax error', () => {
    expect(() => parseConfigText('source:\n  paths: [a\n  keys: b: c\n', '/etc/job.yaml')).toThrow(
      /config file \/etc\/job\.yaml is not valid YAML at line \d+/,
    )
  })

  it('parses JSON files with JSON rules', () => {
    expect(() => parseConfigText('{"a": 1,}', '/etc/job.json')).toThrow(/is not valid JSON/)
    expect(parseConfigText('{"a": 1}', '/etc/job.json')).toEqual({ a: 1 })
  })
})
