/**
 * Request bodies for the two webhook formats. Pure: the event time is a parameter, and a body is
 * built once (when the digest enters the outbox) so every redelivery sends the same bytes.
 */

import { renderText } from './digest.js'
import type { Digest } from './digest-schema.js'

/** Our own reverse-DNS CloudEvents type; the `.v1` suffix tracks `digestSchemaVersion`. */
export const cloudEventType = 'dev.slopeshift.digest.v1'

/** Webhook body formats (config `notify.webhooks[].format`). */
export type PayloadFormat = 'text' | 'cloudevents'

/** `Content-Type` per format: CloudEvents structured mode has its own media type (CloudEvents JSON format §3). */
export const contentTypeOf: Readonly<Record<PayloadFormat, string>> = {
  text: 'application/json; charset=utf-8',
  cloudevents: 'application/cloudevents+json; charset=utf-8',
}

/** Body of a `text` delivery: a JSON object whose `text` field holds the rendered message. */
export interface TextBody {
  readonly text: string
}

/** A CloudEvents 1.0 event in structured mode carrying a digest as `data`. */
export interface DigestCloudEvent {
  readonly specversion: '1.0'
  /** The digest id: the same event keeps the same id on redelivery (CloudEvents: source + id is unique). */
  readonly id: string
  /** URI-reference naming the producer: `/slopeshift/jobs/<job>`. */
  readonly source: string
  readonly type: typeof cloudEventType
  /** RFC 3339 time the digest was built. */
  readonly time: string
  readonly datacontenttype: 'application/json'
  /** The run id the digest reports on. */
  readonly subject: string
  readonly data: Digest
}

/** Wraps the rendered digest text as `{ "text": … }`. */
export function toTextBody(digest: Digest): TextBody {
  return { text: renderText(digest) }
}

/**
 * Wraps the digest in a CloudEvents 1.0 structured-mode event. `timeMs` (epoch ms) is the time the
 * digest was built; pass it in (no clock here). The job name is percent-encoded into `source`.
 */
export function toCloudEvent(digest: Digest, timeMs: number): DigestCloudEvent {
  return {
    specversion: '1.0',
    id: digest.id,
    source: `/slopeshift/jobs/${encodeURIComponent(digest.job)}`,
    type: cloudEventType,
    time: new Date(timeMs).toISOString(),
    datacontenttype: 'application/json',
    subject: digest.runId,
    data: digest,
  }
}

/** The serialized body and its content type for one format. */
export interface EncodedBody {
  readonly body: string
  readonly contentType: string
}

/** Serializes the digest for `format`: the exact bytes that are signed and sent. */
export function encodeBody(digest: Digest, format: PayloadFormat, timeMs: number): EncodedBody {
  const value = format === 'text' ? toTextBody(digest) : toCloudEvent(digest, timeMs)
  return { body: JSON.stringify(value), contentType: contentTypeOf[format] }
}
