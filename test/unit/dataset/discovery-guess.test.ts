import { describe, expect, it } from 'vitest'
import { discoveryGuess } from '../../../src/dataset/discovery-guess.js'
import { sameDiscoveryInputs } from '../../../src/dataset/early-discovery.js'

const file = '/etc/jobs/cold-chain.yaml'

describe('discoveryGuess', () => {
  it('resolves source paths and the excluded output root from the config file folder, format auto by default', () => {
    const raw = { source: { paths: ['../lake/parquet', '/abs/arrow'] }, output: { root: 'out' } }
    expect(discoveryGuess(raw, file, {})).toEqual({
      inputs: ['/etc/lake/parquet', '/abs/arrow'],
      options: { format: 'auto', exclude: ['/etc/jobs/out'] },
    })
  })

  it('interpolates environment references, defaults included, and keeps a given format', () => {
    const raw = { source: { paths: ['${LAKE}/day=*', '${MORE:-/spare}'], format: 'arrow' }, output: { root: '${OUT}' } }
    expect(discoveryGuess(raw, file, { LAKE: '/data', OUT: '/tables' })).toEqual({
      inputs: ['/data/day=*', '/spare'],
      options: { format: 'arrow', exclude: ['/tables'] },
    })
  })

  it.each([
    ['an unset variable', { source: { paths: ['${NOPE}'] }, output: { root: 'out' } }],
    ['no source paths', { source: {}, output: { root: 'out' } }],
    ['paths that are not strings', { source: { paths: [3] }, output: { root: 'out' } }],
    ['an empty path list', { source: { paths: [] }, output: { root: 'out' } }],
    ['no output root', { source: { paths: ['a'] }, output: {} }],
    ['an unknown format', { source: { paths: ['a'], format: 'csv' }, output: { root: 'out' } }],
    ['not an object', ['source']],
  ])('makes no guess for %s', (_what, raw) => {
    expect(discoveryGuess(raw, file, {})).toBeNull()
  })
})

describe('sameDiscoveryInputs', () => {
  const a = { inputs: ['/l/a', '/l/b'], options: { format: 'auto' as const, exclude: ['/o'] } }

  it('is true for equal inputs and options, an absent format counting as auto', () => {
    expect(sameDiscoveryInputs(a, { inputs: ['/l/a', '/l/b'], options: { exclude: ['/o'] } })).toBe(true)
  })

  it('is false when the inputs, their order, the format or the exclusions differ', () => {
    expect(sameDiscoveryInputs(a, { ...a, inputs: ['/l/b', '/l/a'] })).toBe(false)
    expect(sameDiscoveryInputs(a, { ...a, inputs: ['/l/a'] })).toBe(false)
    expect(sameDiscoveryInputs(a, { ...a, options: { format: 'parquet', exclude: ['/o'] } })).toBe(false)
    expect(sameDiscoveryInputs(a, { ...a, options: { format: 'auto', exclude: ['/other'] } })).toBe(false)
  })
})
