package trigger

// localMax reports whether cell (ie, ip), index c, of value v beats its 8
// neighbours: a larger value wins, and of equal values the lower cell
// index. Cells past the eta edges are empty; phi wraps.
func localMax(cells []float64, neta, nphi, ie, ip int, v float64, c int) bool {
	for de := -1; de <= 1; de++ {
		e := ie + de
		if e < 0 || e >= neta {
			continue
		}
		for dp := -1; dp <= 1; dp++ {
			if de == 0 && dp == 0 {
				continue
			}
			k := e*nphi + (ip+dp+nphi)%nphi
			if n := cells[k]; n > v || (n == v && k < c) {
				return false
			}
		}
	}
	return true
}
