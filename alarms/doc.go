// Package alarms holds glowgate's alarm rules and the alarm state machine:
// over-temperature, rate, deviation and measurement-quality alarms of a
// pyrometer head, handled the way alarm management practice (ISA-18.2 /
// IEC 62682) expects.
//
// A Rule says what one alarm watches (Kind), its limit, deadband, on- and
// off-delays, priority, latching, re-alarm and suppression by design. An
// Alarm is one rule's runtime state; a Set holds the alarms of one head.
// Evaluate applies a Sample (the processed temperature, its quality and
// flags); Tick applies the passing of time; Acknowledge, Shelve, Unshelve
// and SetOutOfService are the operator's actions. Each appends the
// resulting Events to a slice the caller owns. Snapshot and Restore carry
// the state across restarts; Flood counts annunciations to tell a flood and
// chattering alarms.
//
// # States
//
// The states are ISA-18.2's (read through OPC UA Part 9, 3.1 and B.1.5):
//
//	normal ──activated──▶ unacknowledged ──acknowledged──▶ acknowledged
//	   ▲                       │    ▲                            │
//	   │                cleared│    │activated / realarm         │cleared
//	   │                       ▼    │                            ▼
//	   └──acknowledged── rtn_unacknowledged                    normal
//
// A latching alarm goes to latched instead when its condition clears,
// whether acknowledged before or not, and only Acknowledge (the reset)
// brings it back to normal. Shelved, suppressed and out_of_service rank
// above these: an alarm out of service shows out_of_service, otherwise a
// shelved one shows shelved, otherwise a suppressed one shows suppressed.
//
// # Conditions
//
// A high-type condition (High, HighHigh, RateRise, RateFall, Deviation)
// holds when the value is above Setpoint and, once the alarm is active,
// until the value is at or below Setpoint − Deadband; a low-type one
// (Low, LowLow) mirrors it. So a value wandering inside the deadband
// activates the alarm once. The deadband is taken from the alarm's
// activity: a pending activation needs the value above Setpoint all along,
// and a pending clearing needs it at or below Setpoint − Deadband all
// along.
//
// Rates are the change across Window: (T − T₀)/(t − t₀) with (t₀, T₀) the
// oldest kept sample no more than Window old; no rate is given until the
// kept samples span half the window. Smoothing is the processing stage's
// job, before the alarms.
//
// # Delays and quality
//
// The condition must hold for OnDelay before the alarm activates, and be
// gone for OffDelay before it clears. Time counts from one usable sample
// to the next event (sample or Tick) while the observed condition differs
// from the alarm's. A sample that says nothing of the condition pauses the
// timer: it neither activates nor clears the alarm, and the time after it
// does not count, but the time already counted is kept, so a condition
// seen on both sides of a stretch of bad samples still completes its delay
// (after as much more usable time as it lacked). Pausing rather than
// restarting keeps a real over-temperature from being held off for ever by
// flickering quality; not counting the bad stretch keeps the delay honest.
//
// Which samples say nothing: for High, HighHigh, Low, LowLow, the rates
// and Deviation, a sample of Bad quality, with no temperature (NaN, ±Inf,
// ≤ 0), with FlagCommError, or (Deviation) without the other head's
// temperature; Uncertain samples count. For the flag kinds (LowSignal,
// Nongrey, OverRange, BelowRange), a sample with FlagCommError. BadQuality
// and NoData read every sample: BadQuality raises (after its own on-delay)
// when samples stay Bad, telling the operator that the temperature alarms
// are blind; NoData raises when no sample without FlagCommError has come
// for Periods × Period (found by Tick, or by a sample with the flag), or
// when Periods samples in a row carried FlagCommError.
//
// An activation completes only on a sample that shows the condition (for
// NoData, on Tick too), so one spike followed by silence raises nothing; a
// clearing may complete on Tick when the last sample was usable.
//
// # Acknowledgment, re-alarm, shelving, suppression, service
//
// Re-alarm: an alarm that has stood active and acknowledged for Realarm
// (counted from the acknowledgment) becomes unacknowledged again, "as if
// it had just occurred" (OPC UA Part 9 B.1.5).
//
// Shelving withdraws the alarm from the operator until a time: an
// unacknowledged or latched alarm stops asking for attention; the
// condition is still followed, its changes giving events from shelved to
// shelved; at the expiry or on Unshelve an active alarm is annunciated
// again. Suppression by design does the same while its rule's Suppression
// holds. Out of service, an alarm is not evaluated at all; back in service
// it starts from normal.
//
// # Time
//
// Every time is an argument: the sample's acquisition time for Evaluate,
// the caller's now for Tick and the actions. Timers run on the wall-clock
// reading of those times (monotonic readings are not used). A clock that
// steps back neither counts the step nor stalls: delays count on from the
// new reading and the rate history starts again; a forward step counts as
// time passed.
//
// The package is pure: no I/O, no clock (time is always an argument), no
// goroutines, no package state. An Alarm, Set or Flood must not be used
// from two goroutines at once.
package alarms
