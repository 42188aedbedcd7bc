package stats

import (
	"fmt"
	"math"
)

// ClopperPearson returns the Clopper-Pearson ("exact") central interval of
// confidence level cl (such as 0.95) for a binomial proportion after k
// successes in n trials (C.J. Clopper, E.S. Pearson, Biometrika 26 (1934)
// 404): with alpha = 1 - cl,
//
//	lower = BetaQuantile(alpha/2; k, n-k+1), upper = BetaQuantile(1-alpha/2; k+1, n-k),
//
// and the closed forms [0, 1-(alpha/2)^(1/n)] for k = 0 and
// [(alpha/2)^(1/n), 1] for k = n, where one Beta parameter would be zero.
// n = 0 gives [0, 1]. It panics if k < 0, k > n or cl is not in (0, 1).
func ClopperPearson(k, n int, cl float64) (lo, hi float64) {
	if k < 0 || k > n {
		panic(fmt.Sprintf("stats: ClopperPearson(%d, %d): want 0 <= k <= n", k, n))
	}
	if !(cl > 0 && cl < 1) {
		panic(fmt.Sprintf("stats: ClopperPearson confidence level %v, want 0 < cl < 1", cl))
	}
	if n == 0 {
		return 0, 1
	}
	half := (1 - cl) / 2
	fk, fn := float64(k), float64(n)
	switch k {
	case 0:
		return 0, 1 - math.Pow(half, 1/fn)
	case n:
		return math.Pow(half, 1/fn), 1
	}
	return BetaQuantile(half, fk, fn-fk+1), BetaQuantile(1-half, fk+1, fn-fk)
}
