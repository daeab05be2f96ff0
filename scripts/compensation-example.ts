// Runnable example for docs/compensation.md:  npx tsx scripts/compensation-example.ts
// A ±2 µm job on a centerless cell with 3 parts between wheel and gauge; the wheel wears
// 0.02 µm/part. The machine answers every command with 'offset-applied'.
import {
  createCompensationState, stepCompensation, restoreCompensationState, type CompensationState,
} from '../shared/utils/compensation'

let state: CompensationState = createCompensationState({
  upperSpecUm: 2,
  lowerSpecUm: -2,
  strategy: 'drift',
  pipelineParts: 3,
  gain: 1.1, // µm of diameter per µm of axis offset
  maxStepUm: 1,
  dress: { policy: 'adaptive', wearBudgetUm: 4, minIntervalParts: 100, maxIntervalParts: 800 },
})

// A toy cell: size = wear + 1.1 × offset in force when the part was ground, gauged 3 parts later.
const ground: number[] = []
let offsetInForce = 0
for (let part = 0; part < 60; part++) {
  ground.push(0.02 * part + 1.1 * offsetInForce + 0.3 * Math.sin(part * 1.7))
  if (part < 3) continue
  const seq = part - 3 + 1
  const { state: next, decision } = stepCompensation(state, {
    type: 'reading',
    seq,
    time: Date.UTC(2026, 0, 5, 22, 0, 0) + part * 20_000,
    deviationUm: ground[seq - 1]!,
  })
  state = next
  if (decision.command) {
    offsetInForce = decision.command.newOffsetUm // the machine applies it and acknowledges:
    state = stepCompensation(state, { type: 'offset-applied', offsetUm: offsetInForce }).state
  }
  if (seq % 10 === 0 || decision.command?.limitedBy.length) {
    const p = decision.prediction
    console.log(`#${seq} ${decision.reason}`)
    console.log(`    slope ${p.slopeUmPerPart?.toFixed(4)} µm/part · spec limit in ${p.partsToSpecLimit ?? '—'} parts · dress in ${p.partsToDress} parts · alerts [${decision.alerts.map((a) => a.code).join(', ')}]`)
  }
}

// The state is plain JSON: store it, restore it after a restart, carry on.
const saved = JSON.stringify(state)
state = restoreCompensationState(saved)
const { decision } = stepCompensation(state, { type: 'dress' })
console.log(`dress event → ${decision.reason}`)
console.log(`hold: ${decision.hold?.reason} (${decision.hold?.partsRemaining} parts)`)
console.log(`garbage → ${stepCompensation(state, { type: 'reading', seq: 58, deviationUm: Number.NaN }).decision.reason}`)
