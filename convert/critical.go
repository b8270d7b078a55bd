package convert

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// CriticalValues holds Student's t two-sided critical values
// t_{1−p/2, ν} for one significance p and ν = 1 … MaxDF: what a Loss
// compares the t statistic of its trend with. An exact quantile costs
// 15–30 µs, so a table of a few hundred takes milliseconds to build; it
// never changes afterwards, and the Loss detectors of one significance and
// window can share one (LossConfig.Critical), from any goroutine.
type CriticalValues struct {
	p float64
	t []float64 // t[ν]; t[0] = NaN
}

// lossExactDF is the largest number of degrees of freedom for which the
// quantile comes from gonum's distuv; above it the Cornish–Fisher
// expansion in studentTCritical is used.
const lossExactDF = 256

// NewCriticalValues computes the table for significance p in (0, 1) and ν
// from 1 to maxDF ≥ 1.
func NewCriticalValues(p float64, maxDF int) (*CriticalValues, error) {
	switch {
	case !(p > 0 && p < 1):
		return nil, fmt.Errorf("convert: significance %g: must be in (0, 1)", p)
	case maxDF < 1 || maxDF > maxRingCapacity:
		return nil, fmt.Errorf("convert: %d degrees of freedom: must be in [1, %d]", maxDF, maxRingCapacity)
	}
	c := &CriticalValues{p: p, t: make([]float64, maxDF+1)}
	c.t[0] = math.NaN()
	q := 1 - p/2
	z := distuv.UnitNormal.Quantile(q)
	for nu := 1; nu <= maxDF; nu++ {
		if nu <= lossExactDF {
			c.t[nu] = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(nu)}.Quantile(q)
		} else {
			c.t[nu] = studentTCritical(z, float64(nu))
		}
	}
	return c, nil
}

// Significance is the table's p.
func (c *CriticalValues) Significance() float64 { return c.p }

// MaxDF is the largest ν the table holds.
func (c *CriticalValues) MaxDF() int { return len(c.t) - 1 }

// At is t_{1−p/2, ν}, or NaN when ν is outside 1 … MaxDF.
func (c *CriticalValues) At(nu int) float64 {
	if nu < 1 || nu >= len(c.t) {
		return math.NaN()
	}
	return c.t[nu]
}
