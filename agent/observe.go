package agent

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"plumb/agent/config"
	"plumb/diagnostics"
)

// Observation is what the alert rules see at one point: the numbers the
// limits judge and the findings that alert at once.
//
// When exact dependencies or constant columns make the design singular,
// the rules that name them (exact, constant) speak for the singularity:
// the levels, trends and jumps judge the design without the columns they
// explain (LeftOut: each equation's dependent column, each constant
// column), so that a level alert keeps describing the near dependency
// among the rest.
type Observation struct {
	At          time.Time // window end (exclusive)
	WindowStart time.Time // zero for a watch without buckets
	// Day is the data time the window ends on: the start of its last
	// bucket (At itself for a watch without buckets).
	Day  time.Time
	Rows int64
	// Full says the window lies wholly within the data: a window still
	// filling holds fewer buckets than the watch's window and opens no
	// alert.
	Full bool

	// ConditionNumber (with the intercept column) and CenteredCondition
	// describe the whole design: +Inf when it is singular.
	ConditionNumber   float64
	CenteredCondition float64

	// The judged design: the columns less LeftOut.
	CondBasis    string  // config.ConditionCentered or config.ConditionIntercept
	Cond         float64 // the condition number the limits apply to
	MaxVIF       float64 // NaN when no column has a VIF
	MaxVIFColumn string
	VIFs         map[string]float64
	R2           float64              // R² of MaxVIFColumn on the other columns
	Drivers      []diagnostics.Driver // what explains MaxVIFColumn
	LeftOut      []string

	// BucketCond and BucketVIF are the judged numbers of the window's last
	// bucket alone (NaN when it has too few rows): they show a drift
	// without the window's lag.
	BucketCond, BucketVIF float64

	Rank, Columns  int
	Exact          []ExactDependency
	Constant       []ConstantColumn
	SuggestedDrops []string
	DropCaution    string
}

// ExactDependency is an exact linear relation among columns.
type ExactDependency struct {
	Dependent string
	Columns   []string
	Equation  string
	// Words says it in plain words where categorical columns take part
	// ("supply_source determines chlorine_mg_l: …"); "" otherwise.
	Words string
	Onset time.Time // first bucket of the unbroken run in which it holds
}

// ConstantColumn is a column that does not vary in the window.
type ConstantColumn struct {
	Name  string
	Value float64   // the value; for a nearly constant column, its mean
	Near  bool      // nearly constant: its spread is rounding of its magnitude
	Onset time.Time // first bucket of its constant run
}

// pointExtra is what the agent keeps beside a point's diagnostics report,
// inside the stored report under the key "plumb": what a replay needs to
// see what the live run saw.
type pointExtra struct {
	WindowStart time.Time            `json:"window_start,omitzero"`
	LastBucket  time.Time            `json:"last_bucket,omitzero"`
	Full        bool                 `json:"window_full"`
	LeftOut     []string             `json:"left_out,omitempty"`
	Judged      *diagnostics.Report  `json:"judged,omitempty"`
	BucketCond  jfloat               `json:"bucket_condition"`
	BucketCCond jfloat               `json:"bucket_centered_condition"`
	BucketVIF   jfloat               `json:"bucket_max_vif"`
	Onsets      map[string]time.Time `json:"onsets,omitempty"`
	// Recent are exact dependencies that hold in the window's last
	// buckets (recentBuckets) but not yet in the whole window: the
	// dependency is forming, and said as such before the window fills with it.
	Recent []diagnostics.Dependency `json:"recent_exact,omitempty"`
}

// newExtra returns the extras of an unbucketed point: always full, no
// per-bucket numbers.
func newExtra() *pointExtra {
	return &pointExtra{Full: true, BucketCond: jfloat(math.NaN()), BucketCCond: jfloat(math.NaN()), BucketVIF: jfloat(math.NaN())}
}

// encodeReport writes a report with its extras as one JSON object.
func encodeReport(rep *diagnostics.Report, x *pointExtra) ([]byte, error) {
	raw, err := json.Marshal(rep)
	if err != nil {
		return nil, err
	}
	xb, err := json.Marshal(x)
	if err != nil {
		return nil, err
	}
	if len(raw) < 2 || raw[0] != '{' {
		return nil, fmt.Errorf("report is not a JSON object")
	}
	var b bytes.Buffer
	b.WriteString(`{"plumb":`)
	b.Write(xb)
	if len(raw) > 2 {
		b.WriteByte(',')
	}
	b.Write(raw[1:])
	return b.Bytes(), nil
}

// decodeReport reads a stored report and its extras (nil for a point
// stored before they existed).
func decodeReport(raw []byte) (*diagnostics.Report, *pointExtra, error) {
	var rep diagnostics.Report
	if err := json.Unmarshal(raw, &rep); err != nil {
		return nil, nil, err
	}
	var wrap struct {
		Plumb *pointExtra `json:"plumb"`
	}
	if err := json.Unmarshal(raw, &wrap); err != nil {
		return nil, nil, err
	}
	return &rep, wrap.Plumb, nil
}

// PointFromReport condenses a diagnostics report into a history point and
// the observation the rules see, for a watch without buckets or a caller
// without per-bucket numbers.
func PointFromReport(watch, segment string, at time.Time, rep *diagnostics.Report) (Point, Observation, error) {
	return pointFrom(watch, segment, at, rep, newExtra(), config.DefaultConditionBasis)
}

func pointFrom(watch, segment string, at time.Time, rep *diagnostics.Report, x *pointExtra, basis string) (Point, Observation, error) {
	raw, err := encodeReport(rep, x)
	if err != nil {
		return Point{}, Observation{}, fmt.Errorf("watch %q at %s: encoding the report: %w", watch, at.Format(time.RFC3339), err)
	}
	obs := Observe(at, rep, x, basis)
	p := Point{
		Watch: watch, Segment: segment, At: at,
		RowsUsed: rep.RowsUsed, RowsDropped: rep.RowsDropped,
		ConditionNumber:   obs.ConditionNumber,
		CenteredCondition: obs.CenteredCondition,
		MaxVIF:            obs.MaxVIF, MaxVIFColumn: obs.MaxVIFColumn,
		Rank: rep.Rank, Columns: len(rep.Columns),
		Report: raw,
	}
	for _, c := range rep.Columns {
		p.PerColumn = append(p.PerColumn, ColumnMetric{
			Name: c.Name, VIF: deref(c.VIF), Tolerance: deref(c.Tolerance), R2: deref(c.R2),
			SEInflation: deref(c.SEInflation), Constant: c.Constant, Mean: c.Mean, SD: c.SD,
		})
	}
	return p, obs, nil
}

// leftOut names the columns that the exact and constant rules explain:
// each exact equation's dependent column and each constant column, of the
// window and of extra dependencies.
func leftOut(rep *diagnostics.Report, extra ...diagnostics.Dependency) []string {
	var out []string
	for _, c := range rep.Columns {
		if c.Constant || c.NearConstant {
			out = append(out, c.Name)
		}
	}
	for _, d := range append(slices.Clone(rep.Dependencies), extra...) {
		if d.Kind == diagnostics.KindExact && d.Dependent != "" && !slices.Contains(out, d.Dependent) {
			out = append(out, d.Dependent)
		}
	}
	return out
}

// judgedNumbers returns the condition number on a basis and the largest
// VIF of a report.
func judgedNumbers(rep *diagnostics.Report, basis string) (cond, maxVIF float64, maxCol string) {
	cond = rep.CenteredConditionNumber
	if basis == config.ConditionIntercept {
		cond = rep.ConditionNumber
	}
	cond = finiteOrInf(cond)
	maxVIF = math.Inf(-1)
	// A categorical column is judged by its GVIF^(1/df) (the square of
	// GVIF^(1/(2·df)), on the VIF's scale; Fox & Monette 1992), which
	// does not depend on its base level; its dummies' own VIFs do, and
	// are left out.
	dummy := map[string]bool{}
	for _, g := range rep.GVIF {
		if g.Kind != diagnostics.GroupFactor {
			continue
		}
		for _, c := range g.Columns {
			dummy[c] = true
		}
		if g.GVIFAdjusted != nil {
			if v := *g.GVIFAdjusted * *g.GVIFAdjusted; v > maxVIF {
				maxVIF, maxCol = v, g.Name
			}
		}
	}
	for _, c := range rep.Columns {
		if c.VIF != nil && *c.VIF > maxVIF && !dummy[c.Name] {
			maxVIF, maxCol = *c.VIF, c.Name
		}
	}
	if math.IsInf(maxVIF, -1) {
		maxVIF = math.NaN()
	}
	return cond, maxVIF, maxCol
}

// Observe extracts the rules' view of a report and its extras.
func Observe(at time.Time, rep *diagnostics.Report, x *pointExtra, basis string) Observation {
	if x == nil {
		x = newExtra()
	}
	if basis == "" {
		basis = config.DefaultConditionBasis
	}
	o := Observation{
		At: at, WindowStart: x.WindowStart, Day: at, Rows: rep.RowsUsed, Full: x.Full,
		ConditionNumber:   finiteOrInf(rep.ConditionNumber),
		CenteredCondition: finiteOrInf(rep.CenteredConditionNumber),
		CondBasis:         basis,
		VIFs:              map[string]float64{},
		R2:                math.NaN(),
		BucketVIF:         float64(x.BucketVIF),
		BucketCond:        float64(x.BucketCCond),
		Rank:              rep.Rank,
		Columns:           len(rep.Columns),
		SuggestedDrops:    rep.SuggestedDrops,
		DropCaution:       rep.DropCaution,
		LeftOut:           x.LeftOut,
	}
	if basis == config.ConditionIntercept {
		o.BucketCond = float64(x.BucketCond)
	}
	if !x.LastBucket.IsZero() {
		o.Day = x.LastBucket
	}
	if o.singular() {
		o.ConditionNumber, o.CenteredCondition = math.Inf(1), math.Inf(1)
	}
	judged := rep
	if x.Judged != nil {
		judged = x.Judged
	}
	if len(x.LeftOut) > 0 && x.Judged == nil {
		// Too few columns were left to judge: nothing but the exact and
		// constant rules speaks.
		o.Cond, o.MaxVIF = math.NaN(), math.NaN()
	} else {
		o.Cond, o.MaxVIF, o.MaxVIFColumn = judgedNumbers(judged, basis)
		for _, c := range judged.Columns {
			if c.VIF != nil {
				o.VIFs[c.Name] = *c.VIF
			}
			if c.Name == o.MaxVIFColumn {
				o.R2 = deref(c.R2)
				o.Drivers = c.Drivers
			}
		}
	}
	for _, c := range rep.Columns {
		if c.Constant || c.NearConstant {
			v := c.Mean
			if c.Constant {
				v = c.Min
			}
			o.Constant = append(o.Constant, ConstantColumn{Name: c.Name, Value: v, Near: !c.Constant, Onset: x.Onsets[constantKey(c.Name)]})
		}
	}
	for _, d := range append(slices.Clone(rep.Dependencies), x.Recent...) {
		if d.Kind != diagnostics.KindExact || len(d.Columns) == 1 {
			continue // a constant column is reported by its own rule
		}
		e := ExactDependency{Dependent: d.Dependent, Columns: d.Columns, Equation: d.Equation, Words: d.Words}
		e.Onset = x.Onsets[e.subjectKey()]
		o.Exact = append(o.Exact, e)
	}
	return o
}

// ObservationFromPoint rebuilds the observation of a stored point from its
// report.
func ObservationFromPoint(p Point, basis string) (Observation, error) {
	if len(p.Report) == 0 {
		return Observation{At: p.At, ConditionNumber: p.ConditionNumber, CenteredCondition: p.CenteredCondition,
			Cond: p.CenteredCondition, CondBasis: basis, MaxVIF: p.MaxVIF, MaxVIFColumn: p.MaxVIFColumn,
			Rank: p.Rank, Columns: p.Columns, Full: true, R2: math.NaN(), BucketCond: math.NaN(), BucketVIF: math.NaN()}, nil
	}
	rep, x, err := decodeReport(p.Report)
	if err != nil {
		return Observation{}, fmt.Errorf("watch %q point %s: report: %w", p.Watch, p.At.Format(time.RFC3339), err)
	}
	return Observe(p.At, rep, x, basis), nil
}

func finiteOrInf(x float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return math.Inf(1)
	}
	return x
}

func deref(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// subjectKey is the identity of an exact dependency across points: its
// columns, sorted.
//
// A categorical column's dummies count as the column itself: which of
// them an equation names depends on the window's base level and on the
// levels present, not on the cause.
func (d ExactDependency) subjectKey() string {
	cols := tableColumns(d.Columns)
	slices.Sort(cols)
	return strings.Join(cols, "+")
}

// tableColumns returns the table's columns behind accumulated columns, in
// order and each once: a categorical column for its dummies (col[level]),
// any other column itself.
func tableColumns(accumulated []string) []string {
	var out []string
	for _, c := range accumulated {
		if i := strings.LastIndex(c, "["); i > 0 && strings.HasSuffix(c, "]") {
			c = c[:i]
		}
		if !slices.Contains(out, c) {
			out = append(out, c)
		}
	}
	return out
}

// constantKey is the onset key of a constant column (apart from the
// exact dependencies' keys, which join two or more names).
func constantKey(name string) string { return "constant:" + name }
