/**
 * Step 1 of delivery, run after the tables are committed: apply cooldown, build one digest per
 * configured webhook, queue each in the outbox, then save the cooldown state. With `dryRun` nothing
 * is written and the notices that would be queued are returned (for `slopeshift notify --dry-run`).
 */
import type { WebhookConfig } from '../config/schema.js'
import type { WindowSpec } from '../kernel/window.js'
import { type CooldownResult, filterByCooldown, loadCooldownState, saveCooldownState } from './cooldown.js'
import { buildDigest, type DigestInput } from './digest.js'
import type { Digest } from './digest-schema.js'
import { createNotice, type EnqueueResult, enqueue, type Notice } from './outbox.js'

/** What {@link stageDigests} needs: the run's rows and labels plus the notify settings. */
export interface StageInput extends Omit<DigestInput, 'notify' | 'topN' | 'sendAllClear'> {
  /** Output root (holds `_state/`). */
  readonly root: string
  readonly webhooks: readonly Pick<WebhookConfig, 'name' | 'format' | 'topN' | 'sendAllClear'>[]
  /** Config `notify.cooldownWindows`. */
  readonly cooldownWindows: number
  /** The job's window spec (for counting windows between shifts). */
  readonly window: WindowSpec
  /** Epoch ms: CloudEvents `time` and outbox `createdAtMs`. */
  readonly nowMs: number
  /** Build everything, write nothing. */
  readonly dryRun?: boolean
}

/** Per webhook: the digest (null when there was nothing to say) and what happened to its notice. */
export interface StagedDigest {
  readonly webhook: string
  readonly digest: Digest | null
  readonly notice: Notice | null
  /** null in a dry run or when there was no digest. */
  readonly enqueue: EnqueueResult | null
}

/** Result of {@link stageDigests}. */
export interface StageResult {
  readonly staged: readonly StagedDigest[]
  readonly cooldown: CooldownResult
}

/**
 * Applies cooldown, builds and queues the digests. Order matters for crash safety: notices are
 * written before the cooldown state, so a crash in between rebuilds the same digest ids next run and
 * `enqueue` skips the ones already queued or sent.
 */
export async function stageDigests(input: StageInput): Promise<StageResult> {
  const state = await loadCooldownState(input.root)
  const cooldown = filterByCooldown(state, input.rows, input.cooldownWindows, input.window)
  const staged: StagedDigest[] = []
  for (const webhook of input.webhooks) {
    const digest = buildDigest({
      ...input,
      notify: cooldown.notify,
      topN: webhook.topN,
      sendAllClear: webhook.sendAllClear,
    })
    if (digest === null) {
      staged.push({ webhook: webhook.name, digest: null, notice: null, enqueue: null })
      continue
    }
    const notice = createNotice(digest, webhook.name, webhook.format, input.nowMs)
    const result = input.dryRun === true ? null : await enqueue(input.root, notice)
    staged.push({ webhook: webhook.name, digest, notice, enqueue: result })
  }
  if (input.dryRun !== true && input.webhooks.length > 0) await saveCooldownState(input.root, cooldown.next)
  return { staged, cooldown }
}
