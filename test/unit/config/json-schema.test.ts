import { readFile } from 'node:fs/promises'
import { describe, expect, it } from 'vitest'
import { configJsonSchema } from '../../../src/config/json-schema.js'

describe('configJsonSchema', () => {
  it('equals the committed schemas/config.schema.json (run `npm run schemas` after changing the config)', async () => {
    const committed = JSON.parse(
      await readFile(new URL('../../../schemas/config.schema.json', import.meta.url), 'utf8'),
    )
    expect(committed).toEqual(configJsonSchema())
  })

  it('documents defaults and requires the keys without one', () => {
    const s = configJsonSchema() as { required: string[]; properties: Record<string, { required?: string[] }> }
    expect(s.required.sort()).toEqual(['output', 'source', 'window'])
    expect(s.properties.source?.required?.sort()).toEqual(['keys', 'paths', 'x', 'y'])
  })
})
