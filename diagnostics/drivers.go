package diagnostics

import (
	"math"
	"sort"
)

// Limits of the drivers kept in a ColumnReport.
const (
	// driverMinShare: a partner whose |share| of R²_j is below it is left
	// out (common practice, no source).
	driverMinShare = 0.05
	// driverMax: at most this many partners are kept, the largest |share|
	// first.
	driverMax = 5
	// driverMinR2: below this R²_j the other columns explain nothing worth
	// splitting, and 1 − 1/VIF_j has lost too many digits to divide by.
	driverMinR2 = 1e-6
)

// drivers fills ColumnReport.Drivers of every column with a defined VIF.
func (rep *Report) drivers(c *collin) {
	for i := range rep.Columns {
		rep.Columns[i].Drivers = topDrivers(c.pratt(i))
	}
}

// pratt splits R²_j, the R² of regressing regressor j on the others, into
// one share per partner column by Pratt's product measure:
//
//	share_k = β_k·r_jk / R²_j,
//
// β_k the standardized coefficient of column k in that regression and r_jk
// the correlation of columns j and k. The shares sum to 1, because
// R²_j = Σ_k β_k·r_jk; a negative share marks a suppressor, a column that
// raises R²_j only together with the others. The standardized coefficients
// come from P = (SᵀS)⁻¹, the inverse correlation matrix of the independent
// columns: β_k = −P_jk/P_jj. P_jj is VIF_j, so R²_j = 1 − 1/P_jj is the
// ColumnReport's R2, computed apart from the β and r, and the shares sum
// to 1 only to the extent that the two agree.
//
// The partners are the independent columns (c.indep): the dependent column
// of an exact dependency is a combination of its terms and carries no share
// of its own. pratt returns every partner, in column order, or nil when j's
// VIF is undefined or R²_j is below driverMinR2.
func (c *collin) pratt(j int) []Driver {
	v, why := c.vifOf(j)
	if why != "" {
		return nil
	}
	r2 := 1 - 1/v
	if !(r2 >= driverMinR2) {
		return nil
	}
	p := c.tinv.c
	a := c.pos[j]
	ra := c.tinv.d[a*p : (a+1)*p]
	pjj := dot(ra, ra)
	sj := c.vpos(j)
	out := []Driver{}
	for b, k := range c.indep {
		if k == j {
			continue
		}
		beta := -dot(ra, c.tinv.d[b*p:(b+1)*p]) / pjj
		r := 0.0
		sk := c.vpos(k)
		for t := 0; t < c.s.r; t++ {
			r += c.s.at(t, sj) * c.s.at(t, sk)
		}
		out = append(out, Driver{Column: c.d.names[k], Share: beta * r / r2})
	}
	return out
}

// topDrivers keeps the partners whose |share| is at least driverMinShare,
// at most driverMax of them (the largest |share|), ordered by share,
// largest first (suppressors last).
func topDrivers(all []Driver) []Driver {
	var keep []Driver
	for _, dr := range all {
		if math.Abs(dr.Share) >= driverMinShare {
			keep = append(keep, dr)
		}
	}
	sort.SliceStable(keep, func(x, y int) bool { return math.Abs(keep[x].Share) > math.Abs(keep[y].Share) })
	if len(keep) > driverMax {
		keep = keep[:driverMax]
	}
	sort.SliceStable(keep, func(x, y int) bool { return keep[x].Share > keep[y].Share })
	return keep
}

// Column returns the report of the regressor named name, with its VIF, R²_j
// (R2) and drivers, and whether there is one.
func (rep *Report) Column(name string) (ColumnReport, bool) {
	for _, c := range rep.Columns {
		if c.Name == name {
			return c, true
		}
	}
	return ColumnReport{}, false
}

// ColumnSDs returns each regressor's standard deviation, for use as another
// analysis's Options.ReferenceSD (a bucket or segment judged against the
// whole table).
func (rep *Report) ColumnSDs() map[string]float64 {
	out := make(map[string]float64, len(rep.Columns))
	for _, c := range rep.Columns {
		out[c.Name] = c.SD
	}
	return out
}
