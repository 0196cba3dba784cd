package diagnostics

import (
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"

	"gonum.org/v1/gonum/mat"

	"plumb/stream"
)

// Tolerances of the words: a coefficient within wordTol of 1 (or a value
// within wordTol of 0 or 1) is read as that number. The equations have six
// significant digits; the words never claim more than they do.
const wordTol = 1e-6

// maxWordLevels bounds the levels listed in one sentence.
const maxWordLevels = 8

// indicator is one indicator column of a factor.
type indicator struct {
	p     *factorPlan
	level string
}

// tabulator reads cross counts and within-level means off the accumulator:
// for 0/1 indicator columns a and b, the rows with both set number
// M_ab + W·x̄_a·x̄_b (M the centered co-moment, W the sum of weights).
type tabulator struct {
	m   *stream.Moments
	pos map[string]int
	co  *mat.SymDense
	w   float64
}

func newTabulator(m *stream.Moments) *tabulator {
	t := &tabulator{m: m, pos: map[string]int{}, co: m.CoMoment(nil), w: m.SumWeights()}
	for j, n := range m.Names() {
		t.pos[n] = j
	}
	return t
}

// sum returns Σ w·a·b over the rows: for indicators, the (weighted) count
// of rows with both set; for an indicator a and a column b, b's total
// within a's level.
func (t *tabulator) sum(a, b string) float64 {
	i, j := t.pos[a], t.pos[b]
	return t.co.At(i, j) + t.w*t.m.Mean(i)*t.m.Mean(j)
}

// determines reports whether every level of f present lies in a single
// level of g, and if so which f levels make up each g level (in g's
// order).
func (t *tabulator) determines(f, g *factorPlan) ([][]string, bool) {
	sets := make([][]string, len(g.present))
	thr := 1e-9 * t.w
	for _, lf := range f.present {
		hit := -1
		for k, lg := range g.present {
			if t.sum(stream.IndicatorName(f.f.Name, lf), stream.IndicatorName(g.f.Name, lg)) > thr {
				if hit >= 0 {
					return nil, false
				}
				hit = k
			}
		}
		if hit < 0 {
			return nil, false
		}
		sets[hit] = append(sets[hit], lf)
	}
	return sets, true
}

// levelMeans returns the mean of column x within each level of f present.
func (t *tabulator) levelMeans(f *factorPlan, x string) []float64 {
	out := make([]float64, len(f.present))
	for i, l := range f.present {
		ind := stream.IndicatorName(f.f.Name, l)
		out[i] = t.sum(ind, x) / (t.w * t.m.Mean(t.pos[ind]))
	}
	return out
}

// dependencyWords fills Dependency.Words for the exact dependencies: what
// an equation says, in words, with the factors' levels named.
func (rep *Report) dependencyWords(m *stream.Moments, plans []*factorPlan) {
	ind := map[string]indicator{}
	for _, p := range plans {
		for n, l := range p.level {
			ind[n] = indicator{p, l}
		}
	}
	constant := map[string]string{}
	for _, c := range rep.Columns {
		switch {
		case c.Constant:
			constant[c.Name] = "does not vary"
		case c.NearConstant:
			constant[c.Name] = "nearly does not vary"
		}
	}
	var tab *tabulator
	for i := range rep.Dependencies {
		d := &rep.Dependencies[i]
		if d.Kind != KindExact || d.Intercept == nil {
			continue
		}
		if tab == nil && len(plans) > 0 {
			tab = newTabulator(m)
		}
		d.Words = wordsFor(d, ind, constant, tab)
	}
}

// terms returns an exact dependency's terms in column order.
func (d *Dependency) terms() []string {
	var t []string
	for _, c := range d.Columns {
		if c != d.Dependent {
			if _, ok := d.Coefficients[c]; ok {
				t = append(t, c)
			}
		}
	}
	return t
}

func wordsFor(d *Dependency, ind map[string]indicator, constant map[string]string, tab *tabulator) string {
	dep := d.Dependent
	terms := d.terms()
	b0 := *d.Intercept
	if len(terms) == 0 {
		how := constant[dep]
		if how == "" {
			how = "does not vary"
		}
		return fmt.Sprintf("%s %s: every row holds %s, so it duplicates the intercept", dep, how, num6(b0))
	}
	// The columns of the dependency: numeric ones and factors, in column
	// order.
	var nums []string
	var facs []*factorPlan
	for _, c := range d.Columns {
		if x, ok := ind[c]; ok {
			if !slices.Contains(facs, x.p) {
				facs = append(facs, x.p)
			}
		} else {
			nums = append(nums, c)
		}
	}
	switch {
	case len(facs) == 0:
		return numericWords(d, terms, b0)
	case len(nums) == 0 && len(facs) >= 2:
		// Factors nested in one another: say the first pair that is.
		for a, f := range facs {
			for _, g := range facs[a+1:] {
				if w := nestedWords(tab, f, g); w != "" {
					return w
				}
			}
		}
	case len(nums) == 1 && len(facs) == 1:
		// One numeric column fixed within each level of one factor.
		f, x := facs[0], nums[0]
		return fmt.Sprintf("%s determines %s: %s is fixed within each %s level (%s)",
			f.f.Name, x, x, f.f.Name, levelList(f.present, tab.levelMeans(f, x)))
	case len(facs) == 1 && slices.Contains(nums, dep):
		// A numeric part plus an offset per level of one factor.
		f := facs[0]
		offs := make([]float64, len(f.present))
		for i, l := range f.present {
			offs[i] = b0
			if l != f.base {
				offs[i] += d.Coefficients[stream.IndicatorName(f.f.Name, l)]
			}
		}
		var lin strings.Builder
		for _, t := range nums {
			if t == dep {
				continue
			}
			c := d.Coefficients[t]
			switch {
			case lin.Len() == 0 && c < 0:
				lin.WriteString("-")
			case lin.Len() > 0 && c < 0:
				lin.WriteString(" - ")
			case lin.Len() > 0:
				lin.WriteString(" + ")
			}
			lin.WriteString(formatCoef(c) + "·" + t)
		}
		return fmt.Sprintf("%s = %s plus an offset fixed within each %s level (%s)", dep, lin.String(), f.f.Name, levelList(f.present, offs))
	}
	var names []string
	for _, f := range facs {
		names = append(names, f.f.Name)
	}
	var others []string
	for _, c := range nums {
		if c != dep {
			others = append(others, c)
		}
	}
	what := "the dummies of " + andList(names)
	if len(others) > 0 {
		what = andList(others) + " and " + what
	}
	return fmt.Sprintf("%s is a linear combination of %s", dep, what)
}

// nestedWords says how factors f and g nest, when one determines the
// other: "" when neither does.
func nestedWords(tab *tabulator, f, g *factorPlan) string {
	fg, okFG := tab.determines(f, g)
	gf, okGF := tab.determines(g, f)
	switch {
	case okFG && okGF:
		var pairs []string
		for k, lg := range g.present {
			pairs = append(pairs, fg[k][0]+" = "+lg)
		}
		return fmt.Sprintf("%s and %s encode the same grouping: each level of one is one level of the other (%s)",
			f.f.Name, g.f.Name, joinList(pairs, "and"))
	case okGF:
		f, g, fg = g, f, gf
		fallthrough
	case okFG:
		var parts []string
		for k, lg := range g.present {
			if len(parts) == maxWordLevels {
				parts = append(parts, fmt.Sprintf("%d more", len(g.present)-k))
				break
			}
			parts = append(parts, lg+": "+joinList(fg[k], "and"))
		}
		return fmt.Sprintf("%s determines %s: each %s level lies in one %s level (%s)",
			f.f.Name, g.f.Name, f.f.Name, g.f.Name, strings.Join(parts, "; "))
	}
	return ""
}

// numericWords says a dependency among numeric columns: a copy, a shift,
// a rescaling, a sum, or a linear combination.
func numericWords(d *Dependency, terms []string, b0 float64) string {
	dep := d.Dependent
	zero := math.Abs(b0) <= wordTol*math.Max(1, math.Abs(b0))
	if len(terms) == 1 {
		t := terms[0]
		c := d.Coefficients[t]
		switch {
		case math.Abs(c-1) <= wordTol && zero:
			return fmt.Sprintf("%s is a copy of %s", dep, t)
		case math.Abs(c-1) <= wordTol:
			return fmt.Sprintf("%s is %s shifted by %s", dep, t, num6(b0))
		case zero:
			return fmt.Sprintf("%s is %s times %s", dep, num6(c), t)
		}
		return fmt.Sprintf("%s is a linear rescaling of %s", dep, t)
	}
	ones := true
	for _, t := range terms {
		ones = ones && math.Abs(d.Coefficients[t]-1) <= wordTol
	}
	if ones && zero {
		return fmt.Sprintf("%s is the sum of %s", dep, andList(terms))
	}
	return fmt.Sprintf("%s is a linear combination of %s", dep, andList(terms))
}

func num6(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

// levelList writes "level value, level value, …", at most maxWordLevels.
func levelList(levels []string, vals []float64) string {
	var parts []string
	for i, l := range levels {
		if i == maxWordLevels {
			parts = append(parts, fmt.Sprintf("and %d more", len(levels)-i))
			break
		}
		parts = append(parts, l+" "+num6(vals[i]))
	}
	return strings.Join(parts, ", ")
}

func andList(s []string) string { return joinList(s, "and") }

func joinList(s []string, conj string) string {
	if len(s) > maxWordLevels {
		s = append(s[:maxWordLevels:maxWordLevels], fmt.Sprintf("%d more", len(s)-maxWordLevels))
	}
	switch len(s) {
	case 0:
		return ""
	case 1:
		return s[0]
	}
	return strings.Join(s[:len(s)-1], ", ") + " " + conj + " " + s[len(s)-1]
}
