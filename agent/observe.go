package agent

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"plumb/diagnostics"
)

// Observation is what the alert rules see at one point: the headline
// numbers and the findings that alert at once.
type Observation struct {
	At              time.Time
	ConditionNumber float64 // +Inf when undefined
	MaxVIF          float64 // +Inf when a VIF is undefined by an exact dependency
	MaxVIFColumn    string
	VIFs            map[string]float64 // per column; +Inf where an exact dependency leaves it undefined
	Rank, Columns   int
	Exact           []ExactDependency
	Constant        []ConstantColumn
	SuggestedDrops  []string
	DropCaution     string
}

// ExactDependency is an exact linear relation among columns.
type ExactDependency struct {
	Dependent string
	Columns   []string
	Equation  string
}

// ConstantColumn is a column that does not vary in the window.
type ConstantColumn struct {
	Name  string
	Value float64
}

// PointFromReport condenses a diagnostics report into a history point and
// the observation the rules see.
func PointFromReport(watch, segment string, at time.Time, rep *diagnostics.Report) (Point, Observation, error) {
	raw, err := json.Marshal(rep)
	if err != nil {
		return Point{}, Observation{}, fmt.Errorf("watch %q at %s: encoding the report: %w", watch, at.Format(time.RFC3339), err)
	}
	obs := Observe(at, rep)
	p := Point{
		Watch: watch, Segment: segment, At: at,
		RowsUsed: rep.RowsUsed, RowsDropped: rep.RowsDropped,
		ConditionNumber:   finiteOrInf(rep.ConditionNumber),
		CenteredCondition: finiteOrInf(rep.CenteredConditionNumber),
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

// Observe extracts the rules' view of a report.
func Observe(at time.Time, rep *diagnostics.Report) Observation {
	o := Observation{
		At:              at,
		ConditionNumber: finiteOrInf(rep.ConditionNumber),
		MaxVIF:          math.Inf(-1),
		VIFs:            map[string]float64{},
		Rank:            rep.Rank,
		Columns:         len(rep.Columns),
		SuggestedDrops:  rep.SuggestedDrops,
		DropCaution:     rep.DropCaution,
	}
	for _, c := range rep.Columns {
		switch {
		case c.Constant:
			o.Constant = append(o.Constant, ConstantColumn{Name: c.Name, Value: c.Mean})
		case c.VIF != nil:
			o.VIFs[c.Name] = *c.VIF
			if *c.VIF > o.MaxVIF {
				o.MaxVIF, o.MaxVIFColumn = *c.VIF, c.Name
			}
		case c.Undefined == diagnostics.UndefinedExact:
			o.VIFs[c.Name] = math.Inf(1)
			if !math.IsInf(o.MaxVIF, 1) {
				o.MaxVIF, o.MaxVIFColumn = math.Inf(1), c.Name
			}
		}
	}
	if math.IsInf(o.MaxVIF, -1) {
		o.MaxVIF = math.NaN() // no column with a VIF
	}
	for _, d := range rep.Dependencies {
		if d.Kind != "exact" {
			continue
		}
		// A constant column is reported by its own rule.
		if len(d.Columns) == 1 && slices.ContainsFunc(o.Constant, func(c ConstantColumn) bool { return c.Name == d.Columns[0] }) {
			continue
		}
		o.Exact = append(o.Exact, ExactDependency{Dependent: d.Dependent, Columns: d.Columns, Equation: d.Equation})
	}
	return o
}

// ObservationFromPoint rebuilds the observation of a stored point from its
// report.
func ObservationFromPoint(p Point) (Observation, error) {
	if len(p.Report) == 0 {
		return Observation{At: p.At, ConditionNumber: p.ConditionNumber, MaxVIF: p.MaxVIF, MaxVIFColumn: p.MaxVIFColumn,
			Rank: p.Rank, Columns: p.Columns}, nil
	}
	var rep diagnostics.Report
	if err := json.Unmarshal(p.Report, &rep); err != nil {
		return Observation{}, fmt.Errorf("watch %q point %s: report: %w", p.Watch, p.At.Format(time.RFC3339), err)
	}
	o := Observe(p.At, &rep)
	return o, nil
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
func (d ExactDependency) subjectKey() string {
	cols := slices.Clone(d.Columns)
	slices.Sort(cols)
	return strings.Join(cols, "+")
}
