import { describe, expect, it } from 'vitest'
import digestSchemaFile from '../../../schemas/digest.schema.json' with { type: 'json' }
import { buildDigest, type DigestInput } from '../../../src/notify/digest.js'
import { type Digest, digestJsonSchema, digestSchema } from '../../../src/notify/digest-schema.js'
import { cloudEventType, encodeBody, toCloudEvent, toTextBody } from '../../../src/notify/payload.js'
import { checkJsonSchema } from '../../helpers/json-schema-check.js'
import { shifted, shiftRow } from '../../helpers/shift-rows.js'

const input: DigestInput = {
  job: 'cold rooms/north',
  runId: 'run-2026-12-01T02-00',
  keyColumns: ['site', 'compressor'],
  xUnit: 'hour',
  yUnit: 'kW',
  topN: 5,
  sendAllClear: true,
  rows: [
    shiftRow(['north-7', 'c1'], 1),
    shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.0012),
    shifted(['north-7', null], 1, 0, 0.4, 0.02, { ratio: null }),
  ],
  reportUrl: 'https://reports.example.net/cold-rooms/run.html',
}

function digestOf(i: DigestInput): Digest {
  const d = buildDigest(i)
  if (d === null) throw new Error('expected a digest')
  return d
}

const builtAtMs = Date.UTC(2026, 11, 1, 2, 5)

describe('digestJsonSchema', () => {
  it('matches the committed schemas/digest.schema.json (regenerate: npm run schemas)', () => {
    expect(digestSchemaFile).toEqual(digestJsonSchema())
  })
})

describe('toCloudEvent', () => {
  it('has the CloudEvents 1.0 required attributes id, source, specversion and type', () => {
    const ev = toCloudEvent(digestOf(input), builtAtMs)
    expect(ev.specversion).toBe('1.0')
    expect(ev.id).toMatch(/^dg_[0-9a-f]{32}$/)
    // CloudEvents 1.0 §3.1.1: source is a non-empty URI-reference.
    expect(ev.source).toBe('/slopeshift/jobs/cold%20rooms%2Fnorth')
    expect(URL.canParse(ev.source, 'https://receiver.example.net')).toBe(true)
    expect(ev.type).toBe(cloudEventType)
    expect(ev.type).toMatch(/^dev\.slopeshift\./)
    expect(ev.time).toBe('2026-12-01T02:05:00.000Z')
    expect(ev.subject).toBe('run-2026-12-01T02-00')
    expect(ev.datacontenttype).toBe('application/json')
  })

  it('carries data that validates against schemas/digest.schema.json', () => {
    const ev = toCloudEvent(digestOf(input), builtAtMs)
    expect(checkJsonSchema(digestSchemaFile, JSON.parse(JSON.stringify(ev.data)))).toEqual([])
    expect(digestSchema.safeParse(ev.data).success).toBe(true)
  })

  it('produces an all-clear digest that validates as well', () => {
    const clear = digestOf({ ...input, rows: [shiftRow(['north-7', 'c1'], 1)] })
    expect(clear.kind).toBe('all-clear')
    expect(checkJsonSchema(digestSchemaFile, JSON.parse(JSON.stringify(clear)))).toEqual([])
  })

  it('is caught by the schema check when a required field is missing or mistyped', () => {
    const data = JSON.parse(JSON.stringify(digestOf(input))) as Record<string, unknown>
    delete data.counts
    data.shiftTotal = -1
    const problems = checkJsonSchema(digestSchemaFile, data)
    expect(problems).toContain('/: missing required "counts"')
    expect(problems.some((p) => p.startsWith('/shiftTotal: -1 < 0'))).toBe(true)
  })
})

describe('toTextBody', () => {
  it('wraps the rendered message in a text field', () => {
    const body = toTextBody(digestOf(input))
    expect(Object.keys(body)).toEqual(['text'])
    expect(body.text).toContain('rising 3.4× faster than the previous window')
  })
})

describe('encodeBody', () => {
  it('serializes each format with its content type', () => {
    const d = digestOf(input)
    const text = encodeBody(d, 'text', builtAtMs)
    expect(text.contentType).toBe('application/json; charset=utf-8')
    expect(JSON.parse(text.body)).toEqual(toTextBody(d))
    const ce = encodeBody(d, 'cloudevents', builtAtMs)
    expect(ce.contentType).toBe('application/cloudevents+json; charset=utf-8')
    expect(JSON.parse(ce.body)).toEqual(toCloudEvent(d, builtAtMs))
  })
})
