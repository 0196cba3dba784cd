package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"sort"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plumb/connectors"
	"plumb/diagnostics"
)

// scanFlags are the flags of `plumb scan`.
type scanFlags struct {
	db, table, query, where string
	columns                 []string
	target, weight          string
	groups                  []string
	bases                   []string
	maxLevels               int
	format                  string
	precision               string
	vifLimit, condLimit     float64
	timeColumn, bucket      string
	timeZone                string
	segment                 string
	maxSegments             int
	samplePct               float64
	seed                    int64
	parallel                int
	pushdown                bool
	maxCells                int
	statementTimeout        time.Duration
	quiet                   bool
}

func newScanCmd() *cobra.Command {
	var f scanFlags
	cmd := &cobra.Command{
		Use:   "scan [--db URL] (--table NAME | --query SQL) [flags]",
		Short: "read a table once and report its multicollinearity diagnostics",
		Long: `scan streams the chosen columns of one table or query and prints a
report: per column VIF, tolerance, R² against the other columns and the factor
by which its standard error is inflated; condition indices with
variance-decomposition proportions (Belsley-Kuh-Welsch) in two conventions;
near and exact linear dependencies, the exact ones as equations in the
columns' own units and in words; generalized VIFs of declared groups and of
categorical columns; what dropping each column would do. With --target it
also fits OLS and splits each coefficient's variance into its three causes
(poor fit, too little variation, redundancy).

Without --columns every numeric column (integers, floats, numeric) and every
boolean column except the target is used; text columns are listed as skipped
with their number of distinct values. A text column named in --columns, and
any boolean column used, is a categorical factor: it enters as treatment
dummies (one 0/1 column per level but the base level, the most frequent one
unless --base names another) and gets a generalized VIF of its own (Fox &
Monette 1992) with df = levels - 1; GVIF^(1/(2·df)) compares with √VIF and
does not depend on the base. A factor cannot be the --target: plumb fits
ordinary least squares, whose response is numeric.
Rows with NULL, NaN or ±Inf in any used column, or NULL in a factor, are
dropped and counted.

Without --db, scan reads plumb's built-in sample: a water utility's daily
demand features per supply district, generated from a fixed seed.

Rules of thumb (common practice): VIF above 5 is worth a look, above 10 is
serious; a condition index above 30 marks a strong near dependency.`,
		Example: `  plumb scan
  plumb scan --db sqlite:districts.db --table district_daily --target demand_m3
  plumb scan --db postgres://reader@db/features --table ops.district_daily \
      --columns temperature_c,rainfall_mm,metered_volume_m3,billed_volume_m3 --format json
  plumb scan --db sqlite:districts.db --table district_daily \
      --group connections=residential_connections,commercial_connections
  plumb scan --db sqlite:districts.db --table district_daily \
      --columns temperature_c,rainfall_mm,supply_source,tariff_band --base supply_source=reservoir`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			return runScan(cmd.Context(), cmd.OutOrStdout(), cmd.ErrOrStderr(), &f)
		},
	}
	fl := cmd.Flags()
	fl.StringVar(&f.db, "db", "", "database URL: sqlite:PATH or postgres://user@host/db (default: the built-in sample)")
	fl.StringVar(&f.table, "table", "", "table to read, NAME or SCHEMA.NAME")
	fl.StringVar(&f.query, "query", "", "one SELECT (or WITH … SELECT, VALUES) to read instead of a table; runs read-only")
	fl.StringVar(&f.where, "where", "", "filter rows with this SQL condition")
	fl.StringSliceVar(&f.columns, "columns", nil, "regressor columns, comma-separated; a text column named here is a categorical factor (default: every numeric and boolean column but the target)")
	fl.StringVar(&f.target, "target", "", "response column: fit OLS and attribute each coefficient's variance")
	fl.StringVar(&f.weight, "weight", "", "column of non-negative row weights")
	fl.StringArrayVar(&f.groups, "group", nil, "column group for generalized VIF, NAME=a,b,c (repeatable)")
	fl.StringArrayVar(&f.bases, "base", nil, "base level of a categorical column (repeatable; default: its most frequent level)")
	fl.IntVar(&f.maxLevels, "max-levels", connectors.DefaultMaxLevels, "most distinct values a categorical column may have")
	fl.StringVar(&f.format, "format", "text", "output format: text or json")
	fl.StringVar(&f.precision, "precision", "auto", "auto (cross-products, then a QR factor, then a double-double QR factor, each only when the one before cannot be trusted), fast (cross-products only), exact (start at the QR factor) or precise (double-double QR from the start)")
	fl.Float64Var(&f.vifLimit, "vif-limit", 10, "VIF above which a column counts as redundant")
	fl.Float64Var(&f.condLimit, "condition-limit", 30, "condition index above which a near dependency is reported")
	fl.StringVar(&f.timeColumn, "time-column", "", "time column for --bucket")
	fl.StringVar(&f.bucket, "bucket", "", "report per time bucket: hour, day, week or month (needs --time-column)")
	fl.StringVar(&f.timeZone, "time-zone", "UTC", "time zone of bucket boundaries (IANA name)")
	fl.StringVar(&f.segment, "segment", "", "report per value of this column as well as overall")
	fl.IntVar(&f.maxSegments, "max-segments", connectors.DefaultMaxSegments, "most distinct segment values accepted")
	fl.Float64Var(&f.samplePct, "sample", 0, "read about this percentage of rows (0 < PCT < 100), chosen by --seed")
	fl.Int64Var(&f.seed, "seed", 1, "seed for --sample")
	fl.IntVar(&f.parallel, "parallel", 1, "partitions read at once on separate connections (PostgreSQL)")
	fl.BoolVar(&f.pushdown, "pushdown", false, "compute the cross-products inside the database (PostgreSQL; a partitioned table one aggregate per partition)")
	fl.IntVar(&f.maxCells, "max-cells", connectors.DefaultMaxCells, "with --pushdown and text or boolean columns: most cells (bucket × segment × level combinations) per partition before the rows are streamed instead")
	fl.DurationVar(&f.statementTimeout, "statement-timeout", 0, "longest a statement may run, e.g. 90s or 2h; SQLite also waits this long for a writer's lock (default: the connector's: 1h for PostgreSQL; for SQLite no limit and a 5s wait)")
	fl.BoolVarP(&f.quiet, "quiet", "q", false, "no progress line")
	return cmd
}

// scanOutput is the JSON document of `plumb scan`: the overall report with
// the scan's facts beside it.
type scanOutput struct {
	Source  string `json:"source"`
	Table   string `json:"table,omitempty"`
	Query   string `json:"query,omitempty"`
	Target  string `json:"target,omitempty"`
	Sampled bool   `json:"sampled"`
	Read    int64  `json:"rows_read"`
	*diagnostics.Report
	Skipped []skippedColumn  `json:"skipped_columns"`
	Inexact map[string]int64 `json:"inexact_values,omitempty"`
	Groups  []groupOutput    `json:"by_group,omitempty"`
	Limits  limits           `json:"limits"`
	Caution string           `json:"caution"`
}

type limits struct {
	VIF       float64 `json:"vif"`
	Condition float64 `json:"condition"`
}

type skippedColumn struct {
	Name string `json:"name"`
	Type string `json:"type"`
	// Levels is a text column's number of distinct values where the
	// source could tell cheaply (PostgreSQL: its planner statistics, an
	// estimate; SQLite: among the first 100000 rows), at most
	// --max-levels + 1 (LevelsMore: counting stopped there). Factor marks
	// a column that --columns can name as a categorical factor.
	Levels     int  `json:"levels,omitempty"`
	LevelsMore bool `json:"levels_more,omitempty"`
	Factor     bool `json:"usable_as_factor,omitempty"`
}

type groupOutput struct {
	Bucket string `json:"bucket,omitempty"`
	connectors.SegmentJSON
	Error  string              `json:"error,omitempty"`
	Report *diagnostics.Report `json:"report,omitempty"`

	segment string // the key, for the text table
	rows    int64  // usable rows, for the text form's summary
	err     error
}

// caution is printed with every report.
const caution = "Diagnostics describe the data, not causality. Dropping a relevant column trades variance for omitted-variable bias; where results feed decisions about people (credit, health, hiring), defer to the model's governance."

func (f *scanFlags) validate() error {
	switch f.format {
	case "text", "json":
	default:
		return usagef("--format %q: want text or json", f.format)
	}
	switch f.precision {
	case "auto", "fast", "exact", "precise":
	default:
		return usagef("--precision %q: want auto, fast, exact or precise", f.precision)
	}
	if (f.table == "") == (f.query == "") && f.db != "" {
		return usagef("give one of --table or --query")
	}
	if f.bucket != "" && f.timeColumn == "" {
		return usagef("--bucket needs --time-column")
	}
	switch f.bucket {
	case "", "hour", "day", "week", "month":
	default:
		return usagef("--bucket %q: want hour, day, week or month", f.bucket)
	}
	if f.samplePct < 0 || f.samplePct > 100 {
		return usagef("--sample %v: want a percentage between 0 and 100", f.samplePct)
	}
	if f.parallel < 1 {
		return usagef("--parallel %d: want 1 or more", f.parallel)
	}
	if f.statementTimeout < 0 {
		return usagef("--statement-timeout %v: want a positive duration such as 90s, or 0 for the connector's default", f.statementTimeout)
	}
	if !(f.vifLimit > 1) {
		return usagef("--vif-limit %v: want a number above 1", f.vifLimit)
	}
	if !(f.condLimit > 1) {
		return usagef("--condition-limit %v: want a number above 1", f.condLimit)
	}
	if f.maxLevels < 2 {
		return usagef("--max-levels %d: want 2 or more", f.maxLevels)
	}
	return nil
}

// parseBases reads --base COLUMN=LEVEL specs. A level is taken as given
// (spaces included); only the column name is trimmed.
func parseBases(specs []string) (map[string]string, error) {
	if len(specs) == 0 {
		return nil, nil
	}
	b := make(map[string]string, len(specs))
	for _, s := range specs {
		col, level, ok := strings.Cut(s, "=")
		col = strings.TrimSpace(col)
		if !ok || col == "" {
			return nil, usagef("--base %q: want COLUMN=LEVEL, e.g. --base supply_source=reservoir", s)
		}
		if _, dup := b[col]; dup {
			return nil, usagef("--base names column %q twice", col)
		}
		b[col] = level
	}
	return b, nil
}

// checkBases makes sure every --base names a categorical column of the
// plan.
func checkBases(bases map[string]string, plan *connectors.Plan) error {
	var facs []string
	isFac := map[string]bool{}
	for _, c := range plan.Values {
		if c.IsFactor() {
			facs = append(facs, c.Name)
			isFac[c.Name] = true
		}
	}
	names := make([]string, 0, len(bases))
	for c := range bases {
		names = append(names, c)
	}
	sort.Strings(names)
	for _, c := range names {
		if isFac[c] {
			continue
		}
		have := "none; name a text column in --columns to use it as one"
		if len(facs) > 0 {
			have = strings.Join(facs, ", ")
		}
		return usagef("--base %s=%s: column %q is not a categorical column of this scan (categorical here: %s)", c, bases[c], c, have)
	}
	return nil
}

// factorOptions turns the scan's factors into the analysis's, with the
// bases the user named.
func factorOptions(fs []connectors.Factor, bases map[string]string) []diagnostics.Factor {
	out := make([]diagnostics.Factor, 0, len(fs))
	for _, f := range fs {
		out = append(out, diagnostics.Factor{Name: f.Name, Levels: f.Levels, Base: bases[f.Name]})
	}
	return out
}

func parseGroups(specs []string) (map[string][]string, error) {
	if len(specs) == 0 {
		return nil, nil
	}
	g := make(map[string][]string, len(specs))
	for _, s := range specs {
		name, cols, ok := strings.Cut(s, "=")
		name = strings.TrimSpace(name)
		if !ok || name == "" || cols == "" {
			return nil, usagef("--group %q: want NAME=col1,col2", s)
		}
		if _, dup := g[name]; dup {
			return nil, usagef("--group %q given twice", name)
		}
		for _, c := range strings.Split(cols, ",") {
			if c = strings.TrimSpace(c); c != "" {
				g[name] = append(g[name], c)
			}
		}
		if len(g[name]) == 0 {
			return nil, usagef("--group %q names no columns", name)
		}
	}
	return g, nil
}

func runScan(ctx context.Context, stdout, stderr io.Writer, f *scanFlags) error {
	if err := f.validate(); err != nil {
		return err
	}
	groups, err := parseGroups(f.groups)
	if err != nil {
		return err
	}
	bases, err := parseBases(f.bases)
	if err != nil {
		return err
	}
	if f.db == "" {
		path, cleanup, err := writeBuiltinSample()
		if err != nil {
			return err
		}
		defer cleanup()
		f.db = "sqlite:" + path
		if f.table == "" && f.query == "" {
			f.table = sampleTable
		}
		if f.target == "" && f.table == sampleTable && len(f.columns) == 0 {
			f.target = sampleTarget
		}
	}
	loc, err := loadLocation(f.timeZone)
	if err != nil {
		return err
	}
	src, err := connectors.Open(ctx, f.db, connectors.Options{Parallel: f.parallel, Pushdown: f.pushdown, StatementTimeout: f.statementTimeout})
	if err != nil {
		return err
	}
	defer src.Close()

	req := connectors.Request{
		Table: f.table, Query: f.query, Where: f.where,
		Weight:     f.weight,
		TimeColumn: f.timeColumn, Bucket: f.bucket, Location: loc,
		Segment: f.segment, MaxSegments: f.maxSegments,
		MaxLevels: f.maxLevels,
		SamplePct: f.samplePct, Seed: f.seed, MaxCells: f.maxCells,
	}
	what := f.table
	if what == "" {
		what = "query"
	}
	described, err := src.Describe(ctx, req)
	if err != nil {
		return err
	}
	cols, skipped, plan, err := chooseColumns(what, described, req, f)
	if err != nil {
		return err
	}
	if err := checkBases(bases, plan); err != nil {
		return err
	}
	req.Columns = cols
	if len(f.columns) == 0 {
		// Without --columns the source picks the same columns itself (the
		// target among them, found by name), and then also counts the
		// distinct values of the text columns it leaves out.
		req.Columns = nil
	}
	req.QR = f.precision == "exact"
	req.Extended = f.precision == "precise"

	opt := diagnostics.Options{
		Target: f.target, Columns: cols[:len(cols)-boolInt(f.target != "")], Groups: groups,
		VIFLimit: f.vifLimit, CondLimit: f.condLimit,
	}
	res, rep, err := scanAndAnalyze(ctx, what, src, req, opt, bases, f, stderr)
	if err != nil {
		return err
	}
	opt.Factors = factorOptions(res.Factors, bases)
	if res.Fallback != "" {
		rep.Notes = append(rep.Notes, res.Fallback)
	}
	out := scanOutput{
		Source: connectors.Redact(f.db), Table: f.table, Query: f.query, Target: f.target,
		Sampled: res.Sampled, Read: res.Read, Report: rep, Skipped: withLevels(skipped, res.Skipped), Caution: caution,
		Limits: limits{VIF: f.vifLimit, Condition: f.condLimit},
	}
	for j, n := range res.Inexact {
		if n > 0 {
			if out.Inexact == nil {
				out.Inexact = map[string]int64{}
			}
			out.Inexact[res.Columns[j]] = n
		}
	}
	if f.segment != "" || f.bucket != "" {
		// Each bucket's or segment's variation is judged against the
		// whole table's.
		gopt := opt
		gopt.ReferenceSD = rep.ColumnSDs()
		for _, g := range res.Groups {
			gout := groupOutput{SegmentJSON: connectors.SegmentJSONOf(g.Key.Segment), segment: g.Key.Segment, rows: g.Moments.N()}
			if !g.Key.Bucket.IsZero() {
				gout.Bucket = g.Key.Bucket.Format("2006-01-02T15:04:05Z07:00")
			}
			r, err := diagnostics.Analyze(g.Moments, g.QR, gopt)
			if err != nil {
				gout.Error, gout.err = err.Error(), err
			} else {
				gout.Report = r
			}
			out.Groups = append(out.Groups, gout)
		}
	}
	if f.format == "json" {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(&out)
	}
	return writeText(stdout, &out)
}

// scanAndAnalyze runs the scan and the diagnostics. A result whose
// numerical verdict is "not trustworthy" is redone one level up the ladder
// cross-products → QR factor → double-double QR factor (from the level the
// precision flag starts at; never with --precision fast).
func scanAndAnalyze(ctx context.Context, what string, src connectors.Source, req connectors.Request, opt diagnostics.Options, bases map[string]string, f *scanFlags, stderr io.Writer) (*connectors.Result, *diagnostics.Report, error) {
	for {
		bar := newProgress(stderr, f.quiet, what, req.QR || req.Extended)
		req.Progress = bar.update
		res, err := src.Scan(ctx, req)
		bar.finish()
		if errors.Is(err, connectors.ErrTooManyLevels) {
			return nil, nil, fmt.Errorf("%s: %w (the limit is --max-levels, now %d)", what, err, req.MaxLevels)
		}
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", what, err)
		}
		all := res.Merged()
		if err := connectors.CheckMerged(what, res, all); err != nil {
			return nil, nil, err
		}
		opt.Factors = factorOptions(res.Factors, bases)
		rep, err := diagnostics.Analyze(all.Moments, all.QR, opt)
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", what, err)
		}
		// A row with a NULL factor never reached the accumulator: its
		// count is the connector's.
		for _, fc := range res.Factors {
			rep.DroppedBy[fc.Name] = fc.Null
		}
		if rep.Trust.Trustworthy || req.Extended || f.precision == "fast" {
			return res, rep, nil
		}
		if f.pushdown {
			rep.Notes = append(rep.Notes, "the cross-products computed in the database cannot be trusted here; run without --pushdown to let plumb read the rows through a QR factor")
			return res, rep, nil
		}
		next := "a QR factor"
		if req.QR {
			next = "a double-double QR factor"
			req.Extended = true
		}
		req.QR = true
		if !f.quiet {
			fmt.Fprintf(stderr, "plumb: the %s path cannot be trusted here (%s); reading again through %s\n", rep.Path, rep.Trust.Reason, next)
		}
	}
}

func boolInt(b bool) int {
	if b {
		return 1
	}
	return 0
}

// chooseColumns returns the columns to accumulate (regressors, then the
// target; a categorical column by its own name), the columns that were
// skipped and the plan. Mistakes in --columns itself are usage errors; the
// rest is connectors.Choose's.
func chooseColumns(what string, described []connectors.Column, req connectors.Request, f *scanFlags) ([]string, []skippedColumn, *connectors.Plan, error) {
	seen := map[string]bool{}
	req.Columns = nil
	for _, name := range f.columns {
		name = strings.TrimSpace(name)
		if name == "" {
			continue
		}
		if seen[name] {
			return nil, nil, nil, usagef("--columns names %q twice", name)
		}
		seen[name] = true
		if name == f.target {
			return nil, nil, nil, usagef("column %q is the target; leave it out of --columns", name)
		}
		req.Columns = append(req.Columns, name)
	}
	p, err := connectors.Choose(what, described, req, f.target)
	if err != nil {
		return nil, nil, nil, err
	}
	var skipped []skippedColumn
	for _, c := range p.Skipped {
		skipped = append(skipped, skippedColumn{Name: c.Name, Type: c.Type, Levels: c.Levels, LevelsMore: c.LevelsMore, Factor: c.Kind == connectors.KindText})
	}
	return p.Names(), skipped, p, nil
}

// withLevels copies the level counts a scan made of the skipped text
// columns into the list.
func withLevels(skipped []skippedColumn, counted []connectors.Column) []skippedColumn {
	for i := range skipped {
		for _, c := range counted {
			if c.Name == skipped[i].Name && c.Levels > 0 {
				skipped[i].Levels, skipped[i].LevelsMore = c.Levels, c.LevelsMore
			}
		}
	}
	return skipped
}
