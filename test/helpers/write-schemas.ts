/**
 * Regenerates the committed JSON Schemas in schemas/ from their sources in src/
 * (`npm run schemas`). Tests fail when the committed files drift from the code.
 */
import { writeFile } from 'node:fs/promises'
import { configJsonSchema } from '../../src/config/json-schema.js'

const root = new URL('../../schemas/', import.meta.url)
await writeFile(new URL('config.schema.json', root), `${JSON.stringify(configJsonSchema(), null, 2)}\n`)
