/**
 * A small JSON Schema (draft 2020-12) checker for the keywords our committed schemas use: type
 * (string or list), const, enum, properties, required, additionalProperties (false or a schema),
 * propertyNames, items, anyOf, minimum, maximum, pattern, format (date-time, uri). It is written
 * from the specification, independent of zod, so a payload checked here is checked against the
 * schema file itself, not against the code that generated it. Unknown keywords throw, so a schema
 * change the checker cannot judge fails loudly instead of passing silently.
 */

type Schema = Readonly<Record<string, unknown>>

const annotations = new Set(['$schema', '$id', 'title', 'description', 'default', 'examples'])
const handled = new Set([
  'type',
  'const',
  'enum',
  'properties',
  'required',
  'additionalProperties',
  'propertyNames',
  'items',
  'anyOf',
  'minimum',
  'maximum',
  'pattern',
  'format',
])

/** Returns every violation as `<json pointer>: <problem>`; empty when `value` conforms. */
export function checkJsonSchema(schema: unknown, value: unknown, path = ''): string[] {
  if (schema === true) return []
  if (schema === false) return [`${path || '/'}: no value allowed`]
  if (!isObject(schema)) throw new Error(`schema at ${path || '/'} is not an object`)
  const problems: string[] = []
  const at = path || '/'
  for (const k of Object.keys(schema)) {
    if (!annotations.has(k) && !handled.has(k))
      throw new Error(`keyword "${k}" at ${at} is not supported by the checker`)
  }
  if ('type' in schema) {
    const types = Array.isArray(schema.type) ? schema.type : [schema.type]
    if (!types.some((t) => matchesType(String(t), value))) {
      problems.push(`${at}: expected type ${types.join(' | ')}, got ${typeName(value)}`)
      return problems
    }
  }
  if ('const' in schema && !deepEqual(schema.const, value)) {
    problems.push(`${at}: expected ${JSON.stringify(schema.const)}`)
  }
  if (Array.isArray(schema.enum) && !schema.enum.some((e) => deepEqual(e, value))) {
    problems.push(`${at}: ${JSON.stringify(value)} not in enum ${JSON.stringify(schema.enum)}`)
  }
  if (Array.isArray(schema.anyOf)) {
    const branches = schema.anyOf.map((s) => checkJsonSchema(s, value, path))
    if (!branches.some((b) => b.length === 0))
      problems.push(`${at}: matches no anyOf branch (${branches.flat().join('; ')})`)
  }
  if (typeof value === 'number') {
    if (typeof schema.minimum === 'number' && value < schema.minimum)
      problems.push(`${at}: ${value} < ${schema.minimum}`)
    if (typeof schema.maximum === 'number' && value > schema.maximum)
      problems.push(`${at}: ${value} > ${schema.maximum}`)
  }
  if (typeof value === 'string') {
    if (typeof schema.pattern === 'string' && !new RegExp(schema.pattern, 'u').test(value)) {
      problems.push(`${at}: ${JSON.stringify(value)} does not match ${schema.pattern}`)
    }
    if (schema.format === 'date-time' && Number.isNaN(Date.parse(value))) problems.push(`${at}: not a date-time`)
    if (schema.format === 'uri' && !URL.canParse(value)) problems.push(`${at}: not a URI`)
  }
  if (Array.isArray(value) && 'items' in schema) {
    value.forEach((item, i) => {
      problems.push(...checkJsonSchema(schema.items, item, `${path}/${i}`))
    })
  }
  if (isObject(value) && !Array.isArray(value)) {
    const props = isObject(schema.properties) ? schema.properties : {}
    if (Array.isArray(schema.required)) {
      for (const r of schema.required) if (!(String(r) in value)) problems.push(`${at}: missing required "${r}"`)
    }
    for (const [k, v] of Object.entries(value)) {
      const child = `${path}/${k}`
      if (k in props) problems.push(...checkJsonSchema(props[k], v, child))
      else if ('additionalProperties' in schema)
        problems.push(...checkJsonSchema(schema.additionalProperties, v, child))
      if ('propertyNames' in schema) problems.push(...checkJsonSchema(schema.propertyNames, k, `${child} (name)`))
    }
  }
  return problems
}

function matchesType(type: string, value: unknown): boolean {
  switch (type) {
    case 'null':
      return value === null
    case 'boolean':
      return typeof value === 'boolean'
    case 'string':
      return typeof value === 'string'
    case 'number':
      return typeof value === 'number' && Number.isFinite(value)
    case 'integer':
      return typeof value === 'number' && Number.isInteger(value)
    case 'array':
      return Array.isArray(value)
    case 'object':
      return isObject(value) && !Array.isArray(value)
    default:
      throw new Error(`unknown type "${type}"`)
  }
}

function typeName(value: unknown): string {
  if (value === null) return 'null'
  if (Array.isArray(value)) return 'array'
  return typeof value
}

function isObject(v: unknown): v is Schema {
  return typeof v === 'object' && v !== null
}

function deepEqual(a: unknown, b: unknown): boolean {
  return JSON.stringify(a) === JSON.stringify(b)
}
