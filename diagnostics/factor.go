package diagnostics

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"plumb/stream"
)

// Factor is a categorical column (a text or boolean column) whose levels
// the accumulator holds as indicator columns, one per level, named
// stream.IndicatorName(Name, level): the full set, no level dropped. Analyze
// leaves out the base level's indicator (treatment dummies) and the
// indicators of levels absent from the data.
type Factor struct {
	// Name is the column's name.
	Name string
	// Levels are every level known for the column (in the order the
	// caller keeps them, byte order of their text by convention). A level
	// whose indicator column is missing from the accumulator, or is zero
	// in every used row, is absent.
	Levels []string
	// Base is the level left out of the design ("" = the most frequent
	// level present; ties go to the first in byte order). A named base
	// must be one of Levels; when it is absent from the data the most
	// frequent level is used instead and a note says so.
	Base string
}

// Kinds of a generalized-VIF entry (GroupReport.Kind).
const (
	GroupDeclared = "declared" // a group the caller declared (Options.Groups)
	GroupFactor   = "factor"   // the treatment dummies of a factor (Options.Factors)
)

// How a factor's base level was chosen (GroupReport.BaseRule).
const (
	BaseMostFrequent = "most frequent"
	BaseNamed        = "named"
)

// factorPlan is a factor resolved against an accumulator.
type factorPlan struct {
	f        Factor
	present  []string  // levels with at least one used row, in Levels order
	counts   []float64 // their (weighted) row counts
	absent   []string  // levels known but with no used row
	base     string
	baseRule string
	kept     []string          // indicator columns in the design: present minus base
	level    map[string]string // indicator column -> level, for every level with a column
	note     string            // a remark for Report.Notes
}

// df returns the factor's degrees of freedom: levels present − 1.
func (p *factorPlan) df() int { return max(len(p.present)-1, 0) }

// resolveFactors checks opt.Factors against the accumulator, picks each
// factor's base and returns opt with Columns set to the regressors that
// enter the design: the caller's columns (nil = every accumulator column
// but the target), a factor's own name standing for its indicators, minus
// each factor's base and absent indicators.
func resolveFactors(m *stream.Moments, opt Options) (Options, []*factorPlan, error) {
	if len(opt.Factors) == 0 {
		return opt, nil, nil
	}
	all := m.Names()
	pos := make(map[string]int, len(all))
	for i, n := range all {
		pos[n] = i
	}
	var plans []*factorPlan
	owner := map[string]*factorPlan{} // indicator column -> its factor
	byName := map[string]*factorPlan{}
	for _, f := range opt.Factors {
		if f.Name == "" {
			return opt, nil, fmt.Errorf("diagnostics: a factor has no name: %w", ErrBadOptions)
		}
		if byName[f.Name] != nil {
			return opt, nil, fmt.Errorf("diagnostics: factor %q is declared twice: %w", f.Name, ErrBadOptions)
		}
		if _, ok := pos[f.Name]; ok {
			return opt, nil, fmt.Errorf("diagnostics: factor %q is also the name of an accumulated column; a factor is held as its indicator columns %s: %w",
				f.Name, stream.IndicatorName(f.Name, "LEVEL"), ErrBadOptions)
		}
		if _, ok := opt.Groups[f.Name]; ok {
			return opt, nil, fmt.Errorf("diagnostics: factor %q has the name of a declared group; rename the group: %w", f.Name, ErrBadOptions)
		}
		if len(f.Levels) == 0 {
			return opt, nil, fmt.Errorf("diagnostics: factor %q has no levels: %w", f.Name, ErrBadOptions)
		}
		p := &factorPlan{f: f, level: map[string]string{}}
		seen := map[string]bool{}
		for _, l := range f.Levels {
			if seen[l] {
				return opt, nil, fmt.Errorf("diagnostics: factor %q lists level %q twice: %w", f.Name, l, ErrBadOptions)
			}
			seen[l] = true
			ind := stream.IndicatorName(f.Name, l)
			j, ok := pos[ind]
			if ok {
				if o := owner[ind]; o != nil {
					return opt, nil, fmt.Errorf("diagnostics: column %q is an indicator of both factor %q and factor %q: %w", ind, o.f.Name, f.Name, ErrBadOptions)
				}
				owner[ind] = p
				p.level[ind] = l
			}
			if ok && m.N() > 0 && m.Max(j) > 0 {
				p.present = append(p.present, l)
				c := m.Mean(j) * m.SumWeights()
				if m.SumWeights() == float64(m.N()) {
					// Unit weights: a count of rows, off by the rounding
					// of the mean.
					c = math.Round(c)
				}
				p.counts = append(p.counts, c)
			} else {
				p.absent = append(p.absent, l)
			}
		}
		if f.Base != "" && !seen[f.Base] {
			return opt, nil, fmt.Errorf("diagnostics: factor %q has no level %q to be its base (levels: %s): %w",
				f.Name, f.Base, strings.Join(quoted(f.Levels), ", "), ErrBadOptions)
		}
		if opt.Target == f.Name || owner[opt.Target] == p {
			return opt, nil, fmt.Errorf("diagnostics: target %q is a factor; plumb fits ordinary least squares, whose response must be numeric: pick a numeric target or leave the factor among the regressors: %w",
				opt.Target, ErrBadOptions)
		}
		p.chooseBase()
		for _, l := range p.present {
			if l != p.base {
				p.kept = append(p.kept, stream.IndicatorName(f.Name, l))
			}
		}
		plans = append(plans, p)
		byName[f.Name] = p
	}

	// The regressors, with factor names expanded.
	var cols []string
	if opt.Columns == nil {
		for _, n := range all {
			if n != opt.Target {
				cols = append(cols, n)
			}
		}
	} else {
		for _, n := range opt.Columns {
			p := byName[n]
			if p == nil {
				cols = append(cols, n)
				continue
			}
			for _, l := range p.f.Levels {
				if ind := stream.IndicatorName(n, l); hasKey(p.level, ind) {
					cols = append(cols, ind)
				}
			}
		}
	}
	in := map[string]int{}
	for _, n := range cols {
		if p := owner[n]; p != nil {
			in[p.f.Name]++
		}
	}
	for _, p := range plans {
		switch have := in[p.f.Name]; {
		case have == 0:
			return opt, nil, fmt.Errorf("diagnostics: factor %q: none of its indicator columns (%s) is among the regressors; name the factor in the columns: %w",
				p.f.Name, stream.IndicatorName(p.f.Name, "LEVEL"), ErrUnknownColumn)
		case have < len(p.level):
			return opt, nil, fmt.Errorf("diagnostics: factor %q: the columns name %d of its %d indicator columns; name the factor itself so that all of them enter: %w",
				p.f.Name, have, len(p.level), ErrBadOptions)
		}
	}
	dropped := map[string]string{}
	for _, p := range plans {
		for ind, l := range p.level {
			switch {
			case l == p.base:
				dropped[ind] = fmt.Sprintf("the base level of factor %q", p.f.Name)
			case slices.Contains(p.absent, l):
				dropped[ind] = fmt.Sprintf("level %q of factor %q, absent from the data", l, p.f.Name)
			}
		}
	}
	kept := cols[:0:0]
	for _, n := range cols {
		if dropped[n] == "" {
			kept = append(kept, n)
		}
	}
	for g, gc := range opt.Groups {
		for _, n := range gc {
			if why := dropped[n]; why != "" {
				return opt, nil, fmt.Errorf("diagnostics: group %q: column %q is %s, which is left out of the design: %w", g, n, why, ErrBadOptions)
			}
		}
	}
	if len(kept) == 0 {
		var one []string
		for _, p := range plans {
			if len(p.present) == 1 {
				one = append(one, fmt.Sprintf("%q has only level %q", p.f.Name, p.base))
			}
		}
		if len(one) > 0 {
			return opt, nil, fmt.Errorf("diagnostics: no regressor left: factor %s in these rows, so it has no dummies; add columns that vary: %w",
				strings.Join(one, ", factor "), ErrBadOptions)
		}
	}
	opt.Columns = kept
	return opt, plans, nil
}

func hasKey(m map[string]string, k string) bool { _, ok := m[k]; return ok }

// chooseBase sets the base level: the named one when it is present, else
// the most frequent present level (ties: the first in byte order).
func (p *factorPlan) chooseBase() {
	if len(p.present) == 0 {
		return
	}
	if b := p.f.Base; b != "" {
		if slices.Contains(p.present, b) {
			p.base, p.baseRule = b, BaseNamed
			return
		}
		p.note = fmt.Sprintf("factor %q: the named base level %q does not occur in these rows; the most frequent level is the base instead", p.f.Name, b)
	}
	best := 0
	for i := 1; i < len(p.present); i++ {
		ci, cb := p.counts[i], p.counts[best]
		// Counts are sums of weights: equal counts of unit weights come out
		// equal up to the rounding of mean·n.
		tie := math.Abs(ci-cb) <= 1e-9*math.Max(ci, cb)
		if (!tie && ci > cb) || (tie && p.present[i] < p.present[best]) {
			best = i
		}
	}
	p.base, p.baseRule = p.present[best], BaseMostFrequent
}

func quoted(s []string) []string {
	out := make([]string, len(s))
	for i, x := range s {
		out[i] = fmt.Sprintf("%q", x)
	}
	return out
}

// factorGroups appends one generalized-VIF entry per factor.
func (rep *Report) factorGroups(d *design, c *collin, plans []*factorPlan) {
	byName := map[string]int{}
	for j := 0; j < d.k; j++ {
		byName[d.names[j]] = j
	}
	for _, p := range plans {
		gr := GroupReport{
			Name: p.f.Name, Kind: GroupFactor, Columns: append([]string{}, p.kept...), DF: p.df(),
			Levels: append([]string{}, p.present...), Base: p.base, BaseRule: p.baseRule,
			Absent: append([]string{}, p.absent...), Counts: append([]float64{}, p.counts...),
		}
		if gr.DF == 0 {
			gr.Undefined = fmt.Sprintf("only level %q occurs in these rows: the factor is constant here and has no dummies, so no GVIF", p.base)
		} else {
			idx := make([]int, len(p.kept))
			for i, n := range p.kept {
				idx[i] = byName[n]
			}
			gr.GVIF, gr.GVIFAdjusted, gr.Undefined = gvif(c, idx, p.kept)
		}
		if p.note != "" {
			rep.Notes = append(rep.Notes, p.note)
		}
		rep.GVIF = append(rep.GVIF, gr)
	}
}
