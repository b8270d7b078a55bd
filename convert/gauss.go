package convert

import "math"

// gaussLegendre returns the n nodes x_j and weights w_j of the n-point
// Gauss–Legendre rule on [−1, 1], ∫ f(x) dx ≈ Σ w_j f(x_j), exact for
// polynomials of degree 2n − 1.
//
// The nodes are the roots of the Legendre polynomial P_n, found by Newton's
// method on the three-term recurrence
//
//	(k+1) P_{k+1}(x) = (2k+1) x P_k(x) − k P_{k−1}(x)
//
// from the starting values x ≈ cos(π(j − 1/4)/(n + 1/2)); the weights are
// w_j = 2 / ((1 − x_j²) P_n'(x_j)²) (Abramowitz & Stegun 25.4.29). Nodes are
// returned in ascending order. n must be ≥ 1.
func gaussLegendre(n int) (x, w []float64) {
	x = make([]float64, n)
	w = make([]float64, n)
	for j := 0; j < (n+1)/2; j++ {
		z := math.Cos(math.Pi * (float64(j) + 0.75) / (float64(n) + 0.5))
		var dp float64
		for iter := 0; iter < 100; iter++ {
			p0, p1 := 1.0, z
			for k := 1; k < n; k++ {
				p0, p1 = p1, (float64(2*k+1)*z*p1-float64(k)*p0)/float64(k+1)
			}
			// P_n'(z) = n (z P_n − P_{n−1}) / (z² − 1).
			dp = float64(n) * (z*p1 - p0) / (z*z - 1)
			dz := p1 / dp
			z -= dz
			if math.Abs(dz) <= 1e-16 {
				break
			}
		}
		// Recompute the derivative at the converged node for the weight.
		p0, p1 := 1.0, z
		for k := 1; k < n; k++ {
			p0, p1 = p1, (float64(2*k+1)*z*p1-float64(k)*p0)/float64(k+1)
		}
		dp = float64(n) * (z*p1 - p0) / (z*z - 1)
		wj := 2 / ((1 - z*z) * dp * dp)
		x[j], x[n-1-j] = -z, z
		w[j], w[n-1-j] = wj, wj
	}
	if n%2 == 1 {
		x[n/2] = 0
	}
	return x, w
}
