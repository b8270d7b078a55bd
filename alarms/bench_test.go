package alarms

import (
	"math"
	"testing"
	"time"
)

// benchRules are ten rules of one head, of the kinds a caster strand
// might carry (invented figures).
func benchRules() []Rule {
	return []Rule{
		{Name: "high", Kind: High, Setpoint: 1850, Deadband: 15, OnDelay: 2 * time.Second, OffDelay: 2 * time.Second, Priority: PriorityMedium, Realarm: time.Hour},
		{Name: "high_high", Kind: HighHigh, Setpoint: 1900, Deadband: 15, Priority: PriorityUrgent, Latching: true},
		{Name: "low", Kind: Low, Setpoint: 1750, Deadband: 15, OnDelay: time.Second, Priority: PriorityLow},
		{Name: "low_low", Kind: LowLow, Setpoint: 1700, Deadband: 15, Priority: PriorityHigh},
		{Name: "rise", Kind: RateRise, Setpoint: 20, Deadband: 2, Window: 5 * time.Second, Priority: PriorityMedium},
		{Name: "fall", Kind: RateFall, Setpoint: 20, Deadband: 2, Window: 5 * time.Second, Priority: PriorityMedium},
		{Name: "deviation", Kind: Deviation, Setpoint: 25, Deadband: 5, OnDelay: 3 * time.Second, Priority: PriorityMedium},
		{Name: "no_data", Kind: NoData, Periods: 5, Period: 100 * time.Millisecond, Priority: PriorityHigh},
		{Name: "low_signal", Kind: LowSignal, OnDelay: 5 * time.Second, Priority: PriorityLow, SuppressWhen: Suppression{Below: 1000, Hysteresis: 50}},
		{Name: "blind", Kind: BadQuality, OnDelay: 5 * time.Second, Priority: PriorityHigh, SuppressWhen: Suppression{Flags: FlagBelowRange}},
	}
}

// benchSample returns the i-th sample of a 10 Hz stream that wanders
// across the limits, with a bad sample now and then.
func benchSample(i int) Sample {
	s := Sample{
		Time:        at(float64(i) / 10),
		Temperature: 1800 + 120*math.Sin(float64(i)/37) + 5*math.Sin(float64(i)*1.3),
		Other:       1800 + 110*math.Sin(float64(i)/37),
	}
	switch i % 53 {
	case 0:
		s.Quality, s.Flags, s.Temperature = Bad, FlagCommError, math.NaN()
	case 7:
		s.Quality, s.Flags = Uncertain, FlagLowSignal
	}
	return s
}

// benchSamples returns n samples of benchSample.
func benchSamples(n int) []Sample {
	samples := make([]Sample, n)
	for i := range samples {
		samples[i] = benchSample(i)
	}
	return samples
}

// lap returns the i-th sample of the table, moved forward in time by
// whole laps of the table so time never steps back.
func lap(samples []Sample, i int) Sample {
	n := len(samples)
	smp := samples[i%n]
	smp.Time = smp.Time.Add(time.Duration(i/n) * time.Duration(n) * 100 * time.Millisecond)
	return smp
}

// BenchmarkSetEvaluate measures one sample through a head's ten alarms.
func BenchmarkSetEvaluate(b *testing.B) {
	s, err := NewSet(benchRules())
	if err != nil {
		b.Fatal(err)
	}
	samples := benchSamples(4096)
	dst := make([]Event, 0, 64)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		dst = s.Evaluate(lap(samples, i), dst[:0])
	}
}

// BenchmarkAlarmEvaluate measures one sample through one alarm of each
// kind of benchRules.
func BenchmarkAlarmEvaluate(b *testing.B) {
	samples := benchSamples(4096)
	for _, r := range benchRules() {
		b.Run(r.Kind.String(), func(b *testing.B) {
			a, err := NewAlarm(r)
			if err != nil {
				b.Fatal(err)
			}
			dst := make([]Event, 0, 8)
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				dst = a.Evaluate(lap(samples, i), dst[:0])
			}
		})
	}
}

// BenchmarkSetTick measures one tick of a head's ten alarms.
func BenchmarkSetTick(b *testing.B) {
	s, err := NewSet(benchRules())
	if err != nil {
		b.Fatal(err)
	}
	dst := make([]Event, 0, 64)
	s.Evaluate(benchSample(0), dst)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		dst = s.Tick(at(float64(i)/1000), dst[:0])
	}
}
