import { describe, expect, it } from 'vitest'
import { parseWebhookSecret, signPayload, verifySignature, webhookHeaders } from '../../../src/notify/sign.js'

// Standard Webhooks test vector, from the specification's reference library test "sign function works"
// (github.com/standard-webhooks/standard-webhooks, libraries/javascript/src/webhook.test.ts).
const vector = {
  secret: 'whsec_MfKQ9r8GKYqrTwjUPD8ILPZIo2LaLaSw',
  id: 'msg_p5jXN8AQM9LWM0D4loKWxJek',
  timestampSeconds: 1614265330,
  body: '{"test": 2432232314}',
  signature: 'v1,g0hM9SsE+OTPJTGt/tmIKtSyZlE3uFJELVlNIOLJ1OE=',
}

describe('signPayload', () => {
  it('reproduces the Standard Webhooks reference signature', () => {
    expect(signPayload(vector, parseWebhookSecret(vector.secret))).toBe(vector.signature)
  })
})

describe('parseWebhookSecret', () => {
  it('base64-decodes the part after whsec_', () => {
    expect(parseWebhookSecret('whsec_c2VjcmV0LWtleS1ieXRlcw==')).toEqual(Buffer.from('secret-key-bytes'))
  })

  it('uses the UTF-8 bytes of a secret without the prefix', () => {
    const raw = 'kühlraum-hook-secret'
    expect(parseWebhookSecret(raw)).toEqual(Buffer.from(raw, 'utf8'))
    // The documented equivalence: whsec_ + base64(raw bytes) is the same key.
    expect(parseWebhookSecret(`whsec_${Buffer.from(raw).toString('base64')}`)).toEqual(parseWebhookSecret(raw))
  })

  it('throws a config error naming the webhook, not the secret, when the whsec_ part is not base64', () => {
    const attempt = () => parseWebhookSecret('whsec_not base64!', 'ops-chat')
    expect(attempt).toThrow(expect.objectContaining({ code: 'SLOPESHIFT_CONFIG', exitCode: 78 }))
    expect(attempt).toThrow(/secret of webhook "ops-chat" starts with whsec_ but the rest is not base64/)
    expect(attempt).not.toThrow(/not base64!/)
  })

  it('throws a config error for an empty secret', () => {
    expect(() => parseWebhookSecret('', 'ops-chat')).toThrow(/secret of webhook "ops-chat" is empty/)
  })
})

describe('verifySignature', () => {
  const key = parseWebhookSecret(vector.secret)
  const received = {
    id: vector.id,
    timestamp: String(vector.timestampSeconds),
    signature: vector.signature,
    body: vector.body,
    nowSeconds: vector.timestampSeconds + 10,
  }

  it('accepts the reference vector', () => {
    expect(verifySignature(received, key)).toEqual({ kind: 'valid' })
  })

  it('rejects a tampered body, id or timestamp', () => {
    expect(verifySignature({ ...received, body: '{"test": 2432232315}' }, key).kind).toBe('invalid')
    expect(verifySignature({ ...received, id: 'msg_other' }, key)).toEqual({ kind: 'invalid', reason: 'no-match' })
    const ts = String(vector.timestampSeconds + 1)
    expect(verifySignature({ ...received, timestamp: ts }, key)).toEqual({ kind: 'invalid', reason: 'no-match' })
  })

  it('rejects a timestamp outside the 5-minute tolerance even when the signature matches', () => {
    const late = { ...received, nowSeconds: vector.timestampSeconds + 301 }
    expect(verifySignature(late, key)).toEqual({ kind: 'invalid', reason: 'stale-timestamp' })
  })

  it('accepts any matching v1 entry among several (key rotation) and ignores other versions', () => {
    const signature = `v2,${vector.signature.slice(3)} v1,Ceo5qEr07ixe2NLpvHk3FH9bwy/WavXrAFQ/9tdO6mc= ${vector.signature}`
    expect(verifySignature({ ...received, signature }, key).kind).toBe('valid')
    const onlyV2 = `v2,${vector.signature.slice(3)}`
    expect(verifySignature({ ...received, signature: onlyV2 }, key).kind).toBe('invalid')
  })

  it('rejects missing headers and a non-numeric timestamp', () => {
    expect(verifySignature({ ...received, signature: undefined }, key)).toEqual({
      kind: 'invalid',
      reason: 'missing-header',
    })
    expect(verifySignature({ ...received, timestamp: 'hello' }, key)).toEqual({
      kind: 'invalid',
      reason: 'bad-timestamp',
    })
  })
})

describe('webhookHeaders', () => {
  it('sends the id as webhook-id and Idempotency-Key, and signs only when a key is given', () => {
    const unsigned = webhookHeaders(vector, null)
    expect(unsigned).toEqual({
      'webhook-id': vector.id,
      'idempotency-key': vector.id,
      'webhook-timestamp': '1614265330',
    })
    expect(webhookHeaders(vector, parseWebhookSecret(vector.secret))['webhook-signature']).toBe(vector.signature)
  })
})
