/** The config's JSON Schema, generated from the zod schema (the single source). */
import { z } from 'zod'
import { configSchema } from './schema.js'

/** JSON Schema (draft 2020-12) of a config file as written: defaults optional. */
export function configJsonSchema(): Record<string, unknown> {
  return {
    ...z.toJSONSchema(configSchema, { io: 'input', target: 'draft-2020-12' }),
    $id: 'urn:slopeshift:schema:config:v1',
    title: 'slopeshift job config',
    description: 'A slopeshift job: where the data is, how to window and test it, where results go.',
  }
}
