package main

import (
	"errors"
	"fmt"
	"io"
	"math"
	"slices"
	"sort"
	"strings"
	"text/tabwriter"

	"plumb/connectors"
	"plumb/diagnostics"
)

// writeText prints the scan report for a person.
func writeText(w io.Writer, out *scanOutput) error {
	var b strings.Builder
	r := out.Report
	what := out.Table
	if what == "" {
		what = "query"
	}
	fmt.Fprintf(&b, "plumb scan of %s in %s\n", what, out.Source)
	fmt.Fprintf(&b, "rows used %d, dropped %d", r.RowsUsed, r.RowsDropped)
	if out.Sampled {
		b.WriteString(" (sampled)")
	}
	b.WriteString("\n")
	if r.RowsDropped > 0 {
		var parts []string
		for _, c := range r.Columns {
			if n := r.DroppedBy[c.Name]; n > 0 {
				parts = append(parts, fmt.Sprintf("%s %d", c.Name, n))
			}
		}
		for _, g := range r.GVIF {
			if n := r.DroppedBy[g.Name]; g.Kind == diagnostics.GroupFactor && n > 0 {
				parts = append(parts, fmt.Sprintf("%s %d", g.Name, n))
			}
		}
		if n := r.DroppedBy[out.Target]; out.Target != "" && n > 0 {
			parts = append(parts, fmt.Sprintf("%s %d", out.Target, n))
		}
		if len(parts) > 0 {
			fmt.Fprintf(&b, "  rows with NULL, NaN or ±Inf by column: %s\n", strings.Join(parts, ", "))
		}
	}
	if len(out.Skipped) > 0 {
		writeSkipped(&b, out.Skipped)
	}
	for name, n := range out.Inexact {
		fmt.Fprintf(&b, "warning: %d values of %s have more digits than float64 holds; they were rounded\n", n, name)
	}
	fmt.Fprintf(&b, "numerical path: %s", r.Path)
	if !r.Trust.Trustworthy {
		fmt.Fprintf(&b, " (not trustworthy: %s)", r.Trust.Reason)
	}
	b.WriteString("\n\n")

	b.WriteString("Columns\n")
	tw := tabwriter.NewWriter(&b, 2, 4, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "column\tVIF\ttolerance\tR² on others\tSE ×\t\t")
	for _, c := range r.Columns {
		note := ""
		switch {
		case c.Constant:
			note = "constant"
		case c.NearConstant:
			note = "nearly constant"
		case c.Undefined != "":
			note = c.Undefined
		case c.VIF != nil && *c.VIF > out.Limits.VIF:
			note = "redundant"
		case c.VIF != nil && *c.VIF > 5:
			note = "worth a look"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t\n", c.Name, num(c.VIF, "%.4g"), num(c.Tolerance, "%.4g"), num(c.R2, "%.6f"), num(c.SEInflation, "%.3g"), note)
	}
	tw.Flush()

	if r.Rank < len(r.Columns)+1 {
		b.WriteString("\nCondition number: singular (an exact dependency; see below)\n")
	} else {
		fmt.Fprintf(&b, "\nCondition number %.4g (intercept included, columns scaled to unit length); %.4g centered\n", r.ConditionNumber, r.CenteredConditionNumber)
	}
	fmt.Fprintf(&b, "rank of [1 X]: %d of %d\n", r.Rank, len(r.Columns)+1)

	var exact, near []diagnostics.Dependency
	for _, d := range r.Dependencies {
		if d.Kind == "exact" {
			exact = append(exact, d)
		} else {
			near = append(near, d)
		}
	}
	if len(exact) > 0 {
		b.WriteString("\nExact linear dependencies (X'X is singular: OLS cannot separate these columns)\n")
		said := map[string]bool{}
		for _, d := range exact {
			fmt.Fprintf(&b, "  %s\n", d.Equation)
			// Two dummies of one factor may carry the same sentence.
			if d.Words != "" && !said[d.Words] {
				fmt.Fprintf(&b, "    %s\n", d.Words)
				said[d.Words] = true
			}
		}
	}
	if len(near) > 0 {
		b.WriteString("\nNear dependencies (condition index above the limit; variance-decomposition proportions)\n")
		for _, d := range near {
			var parts []string
			for _, c := range d.Columns {
				parts = append(parts, fmt.Sprintf("%s %.2f", c, d.Proportions[c]))
			}
			fmt.Fprintf(&b, "  index %.4g: %s\n", d.ConditionIndex, strings.Join(parts, ", "))
		}
	}
	var facs, declared []diagnostics.GroupReport
	for _, g := range r.GVIF {
		if g.Kind == diagnostics.GroupFactor {
			facs = append(facs, g)
		} else {
			declared = append(declared, g)
		}
	}
	if len(facs) > 0 {
		writeFactors(&b, facs)
	}
	if len(declared) > 0 {
		b.WriteString("\nGroups (generalized VIF)\n")
		tw = tabwriter.NewWriter(&b, 2, 4, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "group\tcolumns\tGVIF\tGVIF^(1/2df)\t")
		for _, g := range declared {
			fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t\n", g.Name, len(g.Columns), num(g.GVIF, "%.4g"), num(g.GVIFAdjusted, "%.4g"))
		}
		tw.Flush()
	}
	if reg := r.Regression; reg != nil {
		writeRegression(&b, out.Target, r.RowsUsed, reg)
		b.WriteString("\nWhy each coefficient's variance is what it is: Var(b_j) = sigma² / (SST_j · (1 − R_j²))\n")
		for _, s := range reg.Attribution {
			if s.Inflated {
				fmt.Fprintf(&b, "  %s: mostly %s — %s\n", s.Name, s.Dominant, s.Remedy)
			} else {
				fmt.Fprintf(&b, "  %s: %s\n", s.Name, s.Reason)
			}
		}
	}
	if len(r.SuggestedDrops) > 0 {
		fmt.Fprintf(&b, "\nDropping %s would bring every VIF under %g.\n", strings.Join(dropNames(r.SuggestedDrops, facs), ", "), out.Limits.VIF)
		if r.DropCaution != "" {
			fmt.Fprintf(&b, "  %s\n", r.DropCaution)
		}
	}
	if len(out.Groups) > 0 {
		writeGroups(&b, out)
	}
	fmt.Fprintf(&b, "\n%s\n", out.Caution)
	_, err := io.WriteString(w, termSafeLines(b.String()))
	return err
}

// dropNames says suggested drops for a person: all the dummies of a factor
// as the factor, one dummy as the merging of its level into the base.
func dropNames(drops []string, facs []diagnostics.GroupReport) []string {
	var out []string
	done := map[string]bool{}
	for _, d := range drops {
		if done[d] {
			continue
		}
		name := d
		for _, f := range facs {
			if !slices.Contains(f.Columns, d) {
				continue
			}
			all := true
			for _, c := range f.Columns {
				all = all && slices.Contains(drops, c)
			}
			if all {
				for _, c := range f.Columns {
					done[c] = true
				}
				name = fmt.Sprintf("the categorical column %s (all its dummies)", f.Name)
			} else {
				name = fmt.Sprintf("%s (counting its level with the base level %s)", d, f.Base)
			}
		}
		done[d] = true
		out = append(out, name)
	}
	return out
}

// writeSkipped lists the columns left out of the scan, a text column with
// its number of distinct values, and says how to use text columns.
func writeSkipped(b *strings.Builder, skipped []skippedColumn) {
	var parts []string
	text := false
	for _, s := range skipped {
		switch {
		case s.Factor && s.LevelsMore:
			parts = append(parts, fmt.Sprintf("%s (%s, more than %d values)", s.Name, s.Type, s.Levels-1))
		case s.Factor && s.Levels > 0:
			parts = append(parts, fmt.Sprintf("%s (%s, %d %s)", s.Name, s.Type, s.Levels, plural(s.Levels, "value", "values")))
		default:
			parts = append(parts, fmt.Sprintf("%s (%s)", s.Name, s.Type))
		}
		text = text || s.Factor
	}
	fmt.Fprintf(b, "skipped columns: %s\n", strings.Join(parts, ", "))
	if text {
		b.WriteString("  a text column named in --columns joins as a categorical factor (treatment dummies and a generalized VIF)\n")
	}
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// writeFactors prints one line per categorical column: its levels, the
// base level and why, df, GVIF and GVIF^(1/(2·df)); then the levels known
// but absent and the factors without a GVIF.
func writeFactors(b *strings.Builder, facs []diagnostics.GroupReport) {
	b.WriteString("\nCategorical columns (treatment dummies against a base level; generalized VIF, Fox & Monette 1992)\n")
	tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  column\tlevels\tbase level (rows)\tdf\tGVIF\tGVIF^(1/(2·df))\t")
	var notes []string
	for _, g := range facs {
		base := "—"
		if g.Base != "" {
			rows := ""
			for i, l := range g.Levels {
				if l == g.Base && i < len(g.Counts) {
					rows = fmt.Sprintf("%.10g, ", g.Counts[i])
				}
			}
			base = fmt.Sprintf("%s (%s%s)", g.Base, rows, g.BaseRule)
		}
		fmt.Fprintf(tw, "  %s\t%d\t%s\t%d\t%s\t%s\t\n", g.Name, len(g.Levels), base, g.DF, num(g.GVIF, "%.4g"), num(g.GVIFAdjusted, "%.4g"))
		if len(g.Absent) > 0 {
			notes = append(notes, fmt.Sprintf("  %s: %s known but absent from these rows", g.Name, strings.Join(g.Absent, ", ")))
		}
		if g.Undefined != "" {
			notes = append(notes, fmt.Sprintf("  %s: no GVIF: %s", g.Name, g.Undefined))
		}
	}
	tw.Flush()
	for _, n := range notes {
		b.WriteString(n + "\n")
	}
	b.WriteString("  GVIF^(1/(2·df)) compares with √VIF (the SE × column); it does not depend on the base level.\n")
}

// writeRegression prints the least-squares fit: one line with R² and the
// residual SD in the target's units, then per coefficient its estimate,
// the unit it is in (target units per unit of the column; the intercept is
// in target units), its standard error and the estimate in standard
// errors.
func writeRegression(b *strings.Builder, target string, rows int64, reg *diagnostics.Regression) {
	cols := len(reg.Coefficients)
	with := ""
	if reg.Intercept {
		cols--
		with = " and an intercept"
	}
	fmt.Fprintf(b, "\nLeast-squares fit of %s on %d columns%s, %d rows: R² %.6f, residual SD %.6g %s\n",
		target, cols, with, rows, reg.R2, reg.Sigma, target)
	tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "  coefficient\testimate\tin units of\tstandard error\testimate ÷ SE")
	for _, c := range reg.Coefficients {
		unit := target + " per " + c.Name
		if c.IsIntercept {
			unit = target + " (all columns 0)"
		}
		fmt.Fprintf(tw, "  %s\t%.6g\t%s\t%.4g\t%.3f\n", c.Name, c.Estimate, unit, c.StdError, c.T)
	}
	tw.Flush()
}

// writeGroups prints the groups of --bucket and --segment that could be
// analysed, one line each, and those that could not in one line.
func writeGroups(b *strings.Builder, out *scanOutput) {
	var bad []groupOutput
	b.WriteString("\nBy group\n")
	tw := tabwriter.NewWriter(b, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "bucket\tsegment\trows\tcondition\tmax VIF\trank\tnote")
	shown := 0
	for _, g := range out.Groups {
		if g.Report == nil {
			bad = append(bad, g)
			continue
		}
		gr := g.Report
		fmt.Fprintf(tw, "%s\t%s\t%d\t%.4g\t%s\t%d\t%s\n", g.Bucket, connectors.SegmentLabel(g.segment), gr.RowsUsed, gr.ConditionNumber, maxVIF(gr), gr.Rank, groupNote(gr))
		shown++
	}
	if shown > 0 {
		tw.Flush()
	} else {
		b.WriteString("  (none could be analysed)\n")
	}
	if len(bad) > 0 {
		fmt.Fprintf(b, "%s\n", unusableGroups(bad, len(out.Groups)))
	}
}

// unusableGroups sums up the groups that could not be analysed in one
// line: how many, why (the commonest reasons first), their rows and a
// hint.
func unusableGroups(bad []groupOutput, total int) string {
	type reason struct {
		why        string
		n          int
		lo, hi     int64
		firstGroup string
	}
	var reasons []*reason
	byWhy := map[string]*reason{}
	tooFew := false
	for _, g := range bad {
		why := g.Error
		switch {
		case errors.Is(g.err, diagnostics.ErrTooFewRows):
			why, tooFew = "too few usable rows", true
		case errors.Is(g.err, diagnostics.ErrAllDropped):
			why = "every row has a NULL, NaN or ±Inf"
		case errors.Is(g.err, diagnostics.ErrNoRows):
			why = "no rows"
		}
		r := byWhy[why]
		if r == nil {
			r = &reason{why: why, lo: g.rows, hi: g.rows, firstGroup: strings.TrimSpace(g.Bucket + " " + connectors.SegmentLabel(g.segment))}
			byWhy[why] = r
			reasons = append(reasons, r)
		}
		r.n++
		r.lo, r.hi = min(r.lo, g.rows), max(r.hi, g.rows)
	}
	sort.SliceStable(reasons, func(i, j int) bool { return reasons[i].n > reasons[j].n })
	var parts []string
	for _, r := range reasons {
		rows := fmt.Sprintf("%d rows each", r.lo)
		if r.lo == 1 && r.hi == 1 {
			rows = "1 row each"
		} else if r.lo != r.hi {
			rows = fmt.Sprintf("%d to %d rows", r.lo, r.hi)
		}
		parts = append(parts, fmt.Sprintf("%d with %s (%s; first %s)", r.n, r.why, rows, r.firstGroup))
	}
	line := fmt.Sprintf("%d of %d groups could not be analysed: %s.", len(bad), total, strings.Join(parts, "; "))
	if tooFew {
		line += " Wider buckets or fewer columns give each group enough rows; --format json has each group's error."
	}
	return line
}

func num(v *float64, format string) string {
	if v == nil {
		return "—"
	}
	if math.IsInf(*v, 1) {
		return "∞"
	}
	return fmt.Sprintf(format, *v)
}

func maxVIF(r *diagnostics.Report) string {
	best := math.Inf(-1)
	for _, c := range r.Columns {
		if c.VIF != nil && *c.VIF > best {
			best = *c.VIF
		}
	}
	if math.IsInf(best, -1) {
		return "—"
	}
	return fmt.Sprintf("%.4g", best)
}

func groupNote(r *diagnostics.Report) string {
	var notes []string
	for _, c := range r.Columns {
		if c.Constant {
			notes = append(notes, c.Name+" constant")
		}
	}
	for _, d := range r.Dependencies {
		if d.Kind == "exact" && d.Dependent != "" && len(d.Coefficients) > 0 {
			notes = append(notes, d.Equation)
		}
	}
	return strings.Join(notes, "; ")
}
