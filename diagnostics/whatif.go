package diagnostics

import (
	"math"
	"sort"
)

// DropCaution is the omitted-variable-bias caution attached to every drop
// suggestion.
const DropCaution = "dropping a column that belongs in the model biases the coefficients of the " +
	"columns correlated with it (omitted-variable bias): drop only columns that are redundant by " +
	"construction (a total beside its parts, a copy, a rescaling) or by domain knowledge, or " +
	"combine them instead"

// whatIf fills the one-column drops and the greedy drop suggestion.
func (rep *Report) whatIf(d *design, c *collin, opt Options) {
	rep.WhatIf = []DropReport{}
	for _, k := range c.cols {
		res := c.dropVIF(k)
		dr := DropReport{Dropped: d.names[k], Columns: []DropVIF{}, AllOK: true}
		maxv := math.Inf(-1)
		for _, j := range c.cols {
			if j == k {
				continue
			}
			r := res[j]
			dv := DropVIF{Name: d.names[j], Undefined: r.why}
			if r.why == "" {
				dv.VIF = fptr(r.vif)
				maxv = math.Max(maxv, r.vif)
				if r.vif >= opt.VIFLimit {
					dr.AllOK = false
				}
			} else {
				dr.AllOK = false
			}
			dr.Columns = append(dr.Columns, dv)
		}
		if !math.IsInf(maxv, -1) {
			dr.MaxVIF = fptr(maxv)
		}
		rep.WhatIf = append(rep.WhatIf, dr)
	}
	rep.SuggestedDrops = []string{}
	for _, j := range greedyDrops(d, c, opt.VIFLimit) {
		rep.SuggestedDrops = append(rep.SuggestedDrops, d.names[j])
	}
	if len(rep.SuggestedDrops) > 0 {
		rep.DropCaution = DropCaution
	}
}

// score ranks an outcome: fewer undefined VIFs, then fewer VIFs over the
// limit, then a smaller largest VIF.
type score struct {
	undefined, over int
	maxVIF          float64
}

func (a score) less(b score) bool {
	if a.undefined != b.undefined {
		return a.undefined < b.undefined
	}
	if a.over != b.over {
		return a.over < b.over
	}
	return a.maxVIF < b.maxVIF
}

func scoreOf(res map[int]vifResult, limit float64) score {
	var s score
	for _, r := range res {
		switch {
		case r.why != "":
			s.undefined++
		case r.vif >= limit:
			s.over++
			s.maxVIF = math.Max(s.maxVIF, r.vif)
		default:
			s.maxVIF = math.Max(s.maxVIF, r.vif)
		}
	}
	return s
}

func (c *collin) all() map[int]vifResult {
	out := map[int]vifResult{}
	for _, j := range c.cols {
		v, why := c.vifOf(j)
		out[j] = vifResult{v, why}
	}
	return out
}

// greedyDrops returns a small set of columns whose removal leaves every VIF
// defined and below limit: constant columns first, then the dependent column
// of each exact dependency (the one its equation expresses, as in
// Report.Dependencies), then, while a VIF is over the limit, the column
// whose removal gives the best outcome by the Schur-complement update;
// finally any dropped column that can be put back without breaking the
// limit is put back. Greedy: every suggestion is needed, but the set is not
// guaranteed to be the smallest.
func greedyDrops(d *design, c *collin, limit float64) []int {
	var drops []int
	cur := c
	for len(cur.cols) > 0 {
		s := scoreOf(cur.all(), limit)
		if s.undefined == 0 && s.over == 0 {
			break
		}
		var consts []int
		for _, j := range cur.cols {
			if d.constant[j] || d.nearConst[j] {
				consts = append(consts, j)
			}
		}
		if len(consts) > 0 {
			rest := cur.cols
			for _, j := range consts {
				rest = without(rest, j)
			}
			drops = append(drops, consts...)
			cur = analyzeSet(d, rest)
			continue
		}
		if len(cur.deps) > 0 {
			// Each equation's dependent column: the one its equation
			// expresses (a total beside its parts, a copy, the last
			// dummy), so that the suggestion is the column the owner
			// reads as derived. The rest spans the same space.
			rest := cur.cols
			for _, e := range cur.deps {
				drops = append(drops, e.dep)
				rest = without(rest, e.dep)
			}
			cur = analyzeSet(d, rest)
			continue
		}
		best, bestScore := -1, score{}
		for _, j := range cur.cols {
			sc := scoreOf(cur.dropVIF(j), limit)
			if best < 0 || sc.less(bestScore) {
				best, bestScore = j, sc
			}
		}
		drops = append(drops, best)
		cur = analyzeSet(d, without(cur.cols, best))
	}
	// Prune: put back, latest first, any dropped column without which
	// the result is no better, so that every suggestion is needed.
	for i := len(drops) - 1; i >= 0; i-- {
		trial := append(append([]int(nil), cur.cols...), drops[i])
		sort.Ints(trial)
		o := analyzeSet(d, trial)
		if s := scoreOf(o.all(), limit); s.undefined == 0 && s.over == 0 {
			cur = o
			drops = append(drops[:i], drops[i+1:]...)
		}
	}
	return drops
}
