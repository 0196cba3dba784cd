package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"time"

	"github.com/spf13/cobra"
	"golang.org/x/term"

	"plumb/agent"
	"plumb/agent/config"
	"plumb/agent/sqlstore"
	"plumb/agent/web"
	"plumb/agent/web/storeview"
	"plumb/connectors"
)

// historyPoint is one entry of `plumb history --format json` (an outside
// contract: keep the names). at is the end of the window.
type historyPoint struct {
	At time.Time `json:"at"`
	// ConditionNumber (with the intercept) and CenteredCondition are null
	// when the design is singular, and Singular says so.
	ConditionNumber   *float64 `json:"condition_number"`
	CenteredCondition *float64 `json:"centered_condition_number"`
	Singular          bool     `json:"singular"`
	// MaxVIF is over the columns that have a VIF: constant and exactly
	// dependent columns are reported by their own alerts.
	MaxVIF       *float64 `json:"max_vif"`
	Rank         int      `json:"rank"`
	Rows         int64    `json:"rows"`
	MaxVIFColumn string   `json:"max_vif_column,omitempty"`
	// LeftOut are the columns max VIF leaves out: the dependent column of
	// each exact dependency and each constant column, which their own
	// alerts report.
	LeftOut []string `json:"left_out,omitempty"`
	// Factors are the categorical columns of the window with their
	// generalized VIFs (name, df, gvif, gvif_adjusted, levels,
	// level_counts, base, base_rule, absent); [] when the watch has none.
	Factors []web.Factor `json:"factors"`
}

func newHistoryCmd() *cobra.Command {
	var (
		path, format, segment, plot string
		limit                       int
	)
	cmd := &cobra.Command{
		Use:   "history WATCH [--config FILE] [--format text|json] [--plot FILE.svg|FILE.png]",
		Short: "show a watch's timeline of condition number, max VIF, rank and rows",
		Long: `history prints the watch's points, oldest first: for each window end (or run
time, without buckets) the condition number, the largest VIF and its column,
the rank of [1 X] and the rows used, and for a watch with categorical columns
each one's GVIF^(1/(2·df)) (JSON: "factors" per point, with df, GVIF, levels
present and absent and the base level). Undefined values (a singular design)
are null in JSON. On a terminal the text form ends with sparklines.

With --plot it writes instead the dashboard's timeline chart of the watch (or
of --segment) to a file: condition number and max VIF with the warn and
critical levels and the trend forecast, as SVG or PNG after the file's
extension.`,
		Example: `  plumb history district_volumes --config plumb.yaml
  plumb history district_daily --segment hillside --plot hillside.svg
  plumb history district_volumes --plot volumes.png`,
		Args: oneArg("WATCH"),
		RunE: func(cmd *cobra.Command, args []string) error {
			if format != "text" && format != "json" {
				return usagef("--format %q: want text or json", format)
			}
			if plot != "" {
				ext := strings.ToLower(filepath.Ext(plot))
				if ext != ".svg" && ext != ".png" {
					return usagef("--plot %q: want a file name ending in .svg or .png", plot)
				}
				return runHistoryPlot(cmd, cmd.OutOrStdout(), path, args[0], segment, plot)
			}
			return runHistory(cmd, cmd.OutOrStdout(), path, args[0], segment, limit, format)
		},
	}
	addConfigFlag(cmd, &path)
	cmd.Flags().StringVar(&format, "format", "text", "output format: text or json")
	cmd.Flags().StringVar(&segment, "segment", "", `a segment's history instead of the whole table's: its value, NULL for NULL, or a quoted value ("" for the empty string)`)
	cmd.Flags().IntVar(&limit, "limit", 0, "only the latest N points")
	cmd.Flags().StringVar(&plot, "plot", "", "write the timeline chart to this .svg or .png file instead")
	return cmd
}

func runHistory(cmd *cobra.Command, stdout io.Writer, path, watch, segment string, limit int, format string) error {
	c, st, err := openWatchStore(cmd, path, watch)
	if err != nil {
		return err
	}
	defer st.Close()
	key, err := connectors.KeyOfLabel(segment)
	if err != nil {
		return usageError{err}
	}
	ps, err := st.Points(cmd.Context(), watch, agent.PointQuery{Segment: key, Limit: limit})
	if err != nil {
		return err
	}
	if len(ps) == 0 && segment != "" {
		return unknownSegment(cmd.Context(), st, c.Watch(watch), segment)
	}
	out := make([]historyPoint, 0, len(ps))
	for _, p := range ps {
		singular := p.Columns > 0 && p.Rank < p.Columns+1
		hp := historyPoint{At: p.At.UTC(), ConditionNumber: finite(p.ConditionNumber), CenteredCondition: finite(p.CenteredCondition),
			Singular: singular, MaxVIF: finite(p.MaxVIF), Rank: p.Rank, Rows: p.RowsUsed, MaxVIFColumn: p.MaxVIFColumn}
		if singular {
			hp.ConditionNumber, hp.CenteredCondition = nil, nil
		}
		if o, err := agent.ObservationFromPoint(p, ""); err == nil {
			hp.LeftOut = o.LeftOut
		}
		if hp.Factors, err = storeview.PointFactors(p); err != nil {
			return fmt.Errorf("watch %q: %w", watch, err)
		}
		out = append(out, hp)
	}
	if format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	if len(out) == 0 {
		fmt.Fprintf(stdout, "watch %s has no history yet\n", termSafe(watch))
		return nil
	}
	// One column per categorical column, in the order they first occur:
	// its GVIF^(1/(2·df)).
	var factors []string
	for _, p := range out {
		for _, f := range p.Factors {
			if !slices.Contains(factors, f.Name) {
				factors = append(factors, f.Name)
			}
		}
	}
	widths := make([]int, len(factors))
	var head strings.Builder
	for i, f := range factors {
		widths[i] = max(len([]rune(termSafe(f))), 8)
		fmt.Fprintf(&head, " %*s", widths[i], termSafe(f))
	}
	fmt.Fprintf(stdout, "%-20s %8s %5s %14s %14s %12s%s  %s\n", "data through", "rows", "rank", "condition", "centered", "max VIF", head.String(), "column")
	show := func(v *float64, singular bool) string {
		switch {
		case v != nil:
			return fmtNum(*v)
		case singular:
			return "∞ (singular)"
		}
		return "–"
	}
	for _, p := range out {
		col := p.MaxVIFColumn
		if len(p.LeftOut) > 0 {
			col += " (left out, reported by their own alerts: " + strings.Join(p.LeftOut, ", ") + ")"
		}
		var fcols strings.Builder
		for i, name := range factors {
			fmt.Fprintf(&fcols, " %*s", widths[i], factorCell(p.Factors, name))
		}
		fmt.Fprintf(stdout, "%-20s %8d %5d %14s %14s %12s%s  %s\n", connectors.DataThrough(p.At), p.Rows, p.Rank,
			show(p.ConditionNumber, p.Singular), show(p.CenteredCondition, p.Singular), show(p.MaxVIF, false), fcols.String(), termSafe(col))
	}
	if len(factors) > 0 {
		fmt.Fprintf(stdout, "\n%s: GVIF^(1/(2·df)) of each categorical column, on the scale of √VIF (∞: undefined, a dummy in an exact dependency; –: one level only, or not in the window)\n",
			strings.Join(termSafeAll(factors), ", "))
	}
	if f, ok := stdout.(*os.File); ok && term.IsTerminal(int(f.Fd())) {
		cond := make([]*float64, len(out))
		vif := make([]*float64, len(out))
		for i, p := range out {
			cond[i], vif[i] = p.ConditionNumber, p.MaxVIF
		}
		fmt.Fprintf(stdout, "\ncondition %s\nmax VIF   %s\n", sparkline(cond, 60), sparkline(vif, 60))
	}
	return nil
}

// openWatchStore reads the configuration, checks that it names watch and
// opens its state store without migrating it.
func openWatchStore(cmd *cobra.Command, path, watch string) (*config.Config, *sqlstore.Store, error) {
	c, err := loadStoreConfig(path)
	if err != nil {
		return nil, nil, err
	}
	if c.Watch(watch) == nil {
		return nil, nil, usagef("no watch %q in the configuration", watch)
	}
	st, err := openStore(cmd.Context(), c, false, nil)
	if err != nil {
		return nil, nil, err
	}
	return c, st, nil
}

// unknownSegment is the error for --segment NAME when the watch has no
// history for NAME: it names the segments that have one.
func unknownSegment(ctx context.Context, st agent.Store, w *config.Watch, segment string) error {
	if w.SegmentBy == "" {
		return usagef("watch %q is not segmented (it has no segment_by): leave out --segment %q", w.Name, segment)
	}
	ps, err := st.Points(ctx, w.Name, agent.PointQuery{AllSegs: true})
	if err != nil {
		return err
	}
	seen := map[string]bool{}
	var names []string
	for _, p := range ps {
		if p.Segment != connectors.WholeTable && !seen[p.Segment] {
			seen[p.Segment] = true
			names = append(names, connectors.ParseSegmentKey(p.Segment).String())
		}
	}
	if len(names) == 0 {
		return usagef("watch %q has no segment %q: it has no history of any %s yet (plumb check or backfill records it)", w.Name, segment, w.SegmentBy)
	}
	slices.Sort(names)
	return usagef("watch %q has no segment %q; its segments (values of %s): %s", w.Name, segment, w.SegmentBy, strings.Join(names, ", "))
}

// runHistoryPlot writes the timeline chart the watch page shows, from the
// same view of the store as plumb serve.
func runHistoryPlot(cmd *cobra.Command, stdout io.Writer, path, watch, segment, plot string) error {
	c, st, err := openWatchStore(cmd, path, watch)
	if err != nil {
		return err
	}
	defer st.Close()
	d, err := storeview.New(st, c).Watch(cmd.Context(), watch)
	if err != nil {
		return err
	}
	key, err := connectors.KeyOfLabel(segment)
	if err != nil {
		return usageError{err}
	}
	seg := d.Segment(key)
	if seg == nil {
		return unknownSegment(cmd.Context(), st, c.Watch(watch), segment)
	}
	title := watch + " · " + connectors.ParseSegmentKey(key).String()
	f, err := os.Create(plot)
	if err != nil {
		return fmt.Errorf("--plot: %w", err)
	}
	write := web.WriteTimelineSVG
	if strings.EqualFold(filepath.Ext(plot), ".png") {
		write = web.WriteTimelinePNG
	}
	if err := write(f, title, seg.Timeline, seg.Forecasts, d.Summary.Limits); err != nil {
		f.Close()
		return fmt.Errorf("--plot %s: %w", plot, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("--plot: %w", err)
	}
	fmt.Fprintf(stdout, "wrote %s (%d windows)\n", plot, len(seg.Timeline))
	return nil
}

// sparkline draws the latest width values on a log scale; undefined values
// are drawn as the top bar in a different glyph.
func sparkline(vs []*float64, width int) string {
	if len(vs) > width {
		vs = vs[len(vs)-width:]
	}
	bars := []rune("▁▂▃▄▅▆▇█")
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range vs {
		if v != nil && *v > 0 {
			lo, hi = math.Min(lo, math.Log(*v)), math.Max(hi, math.Log(*v))
		}
	}
	var b strings.Builder
	for _, v := range vs {
		switch {
		case v == nil:
			b.WriteRune('!')
		case !(*v > 0) || hi <= lo:
			b.WriteRune(bars[0])
		default:
			i := int((math.Log(*v) - lo) / (hi - lo) * float64(len(bars)-1))
			b.WriteRune(bars[i])
		}
	}
	return b.String()
}

// factorCell is a categorical column's GVIF^(1/(2·df)) at a point, as
// the history's text shows it.
func factorCell(fs []web.Factor, name string) string {
	for _, f := range fs {
		if f.Name != name {
			continue
		}
		switch {
		case f.GVIFAdjusted != nil:
			return fmtNum(*f.GVIFAdjusted)
		case f.DF > 0:
			return "∞"
		}
	}
	return "–"
}

func termSafeAll(s []string) []string {
	out := make([]string, len(s))
	for i, x := range s {
		out[i] = termSafe(x)
	}
	return out
}
