// Package sim simulates pyrometer heads for commissioning, demonstrations and
// tests: each Head looks at a target whose temperature and sight-path
// transmission follow scripted Profiles, and reports physics-true channel
// signals
//
//	S_i = ε_i · τ(t) · S_i,bb(T(t)) · (1 + noise·n_i)
//
// where S_i,bb is the channel model's blackbody signal (convert.Model), ε_i the
// target's emissivity in channel i, τ the grey transmission of the sight path
// and n_i standard normal noise. A grey loss (τ, or equal ε_i) cancels in the
// channel ratio and shows only in the signal fraction S_i/S_i,bb = ε_i·τ, as it
// does for a real ratio pyrometer; unequal ε_i give an emissivity ratio other
// than 1.
//
// A head may also serve a status word whose bits follow scripted episodes
// (StatusWord) and further scripted values such as its internal temperature
// (Extra), in either register table, and may misbehave on the bus as scripted
// Faults say: silent, late, with a corrupted CRC, with an exception, or with
// a truncated answer, in windows of scenario time.
//
// A Server serves one or more heads over Modbus TCP at one address, and an
// RTUServer serves them as slaves on a simulated Modbus RTU line, a
// pseudo-terminal paced like a serial line at its baud rate; each head
// answers under its own unit id, encoding each value into registers as its
// modbus.Field describes. Scenario time starts when the server starts, on a
// clock the caller may replace (Server.Now, RTUConfig.Now), so tests step
// time instead of waiting.
package sim
