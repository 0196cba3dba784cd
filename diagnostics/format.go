package diagnostics

import (
	"math"
	"strconv"
	"strings"
)

// formatCoef formats a coefficient for an equation: six significant
// digits, no sign (the caller writes " + " or " - ").
func formatCoef(v float64) string {
	return strconv.FormatFloat(math.Abs(v), 'g', 6, 64)
}

// equation renders dep = c₁·t₁ + c₂·t₂ … + c₀. With no terms it is
// dep = c₀ (a constant column). Negative coefficients are written with
// " - "; a leading negative one as "-c·t".
func equation(dep string, terms []string, coef []float64, c0 float64) string {
	var b strings.Builder
	b.WriteString(dep)
	b.WriteString(" = ")
	if len(terms) == 0 {
		if c0 < 0 {
			b.WriteString("-")
		}
		b.WriteString(formatCoef(c0))
		return b.String()
	}
	for i, t := range terms {
		switch {
		case i == 0 && coef[i] < 0:
			b.WriteString("-")
		case i > 0 && coef[i] < 0:
			b.WriteString(" - ")
		case i > 0:
			b.WriteString(" + ")
		}
		b.WriteString(formatCoef(coef[i]))
		b.WriteString("·")
		b.WriteString(t)
	}
	if c0 < 0 {
		b.WriteString(" - ")
	} else {
		b.WriteString(" + ")
	}
	b.WriteString(formatCoef(c0))
	return b.String()
}
