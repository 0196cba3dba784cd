package web

import (
	"math"
	"slices"
	"testing"
	"time"
)

func TestClusterOrder(t *testing.T) {
	// Two blocks: a~c strongly (r = .95), b~d (r = −.90, the sign does not
	// matter), weak links across. Average linkage on 1 − |r| joins each
	// pair first, so each pair ends up side by side (hand-checked).
	r := [][]float64{
		{1, .1, .95, .05},
		{.1, 1, .2, -.9},
		{.95, .2, 1, .1},
		{.05, -.9, .1, 1},
	}
	got := clusterOrder(r)
	pos := map[int]int{}
	for i, c := range got {
		pos[c] = i
	}
	if len(got) != 4 || abs(pos[0]-pos[2]) != 1 || abs(pos[1]-pos[3]) != 1 {
		t.Errorf("order %v: related columns not adjacent", got)
	}
	// Unrelated columns keep their order; a single column is itself.
	if got := clusterOrder([][]float64{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}); !slices.Equal(got, []int{0, 1, 2}) {
		t.Errorf("unrelated columns reordered: %v", got)
	}
	if got := clusterOrder([][]float64{{1}}); !slices.Equal(got, []int{0}) {
		t.Errorf("one column: %v", got)
	}
}

func abs(i int) int {
	if i < 0 {
		return -i
	}
	return i
}

func TestHeatColour(t *testing.T) {
	// The ends and the middle are Tol's BuRd colours as published.
	for v, want := range map[float64]string{-1: "#2166AC", 0: "#F7F7F7", 1: "#B2182B", -2: "#2166AC"} {
		if got := heatColour(v); got != want {
			t.Errorf("heatColour(%v) = %s, want %s", v, got, want)
		}
	}
	// Halfway between two classes mixes them (arithmetic, no source).
	if got := heatColour(0.125); got != mixHex("#F7F7F7", "#FDDBC7", 0.5) {
		t.Errorf("heatColour(.125) = %s", got)
	}
}

func TestFormats(t *testing.T) {
	for _, c := range []struct {
		v    float64
		num  string
		corr string
	}{
		{5, "5", ".00"}, {10, "10", ""}, {7.25, "7.25", ""}, {4218.4, "4218", ""}, {4.5e15, "4.50 × 10¹⁵", ""},
		{math.Inf(1), "∞", ""}, {math.NaN(), "—", "—"}, {0.00123, "0.00123", ""},
		// Numbers for people: grouped, in words, never 1.31e07.
		{43210.4, "43\u202f210", ""}, {131000, "131\u202f000", ""}, {1.31e7, "13.1 million", ""}, {1.0e6, "1 million", ""},
		{999.7e6, "1 billion", ""}, {2.5e9, "2.5 billion", ""}, {-1.31e7, "-13.1 million", ""}, {9.999e14, "1.00 × 10¹⁵", ""},
	} {
		if got := fmtNum(c.v); got != c.num {
			t.Errorf("fmtNum(%v) = %q, want %q", c.v, got, c.num)
		}
	}
	for v, want := range map[float64]string{0: "0", 0.004: "0", -0.45: "−.45", 0.9912: ".991", -0.99996: "−1", 1: "1", 0.5: ".50"} {
		if got := fmtCorr(v); got != want {
			t.Errorf("fmtCorr(%v) = %q, want %q", v, got, want)
		}
	}
	for v, want := range map[float64]string{1: "1", 20: "20", 5000: "5k", 1e6: "10⁶", 1e12: "10¹²"} {
		if got := fmtTick(v); got != want {
			t.Errorf("fmtTick(%v) = %q, want %q", v, got, want)
		}
	}
}

// TestFmtRate: a trend's rate for people, never "-0.0%/day".
func TestFmtRate(t *testing.T) {
	for rate, want := range map[float64]string{
		0.05: "rising 5 %/day", 0.023: "rising 2.3 %/day", -0.004: "falling 0.4 %/day",
		-0.0001: "flat", 0.0004: "flat", 0: "flat", math.NaN(): "no trend",
	} {
		if got := fmtRate(rate); got != want {
			t.Errorf("fmtRate(%v) = %q, want %q", rate, got, want)
		}
	}
}

func TestTimelineChartLayout(t *testing.T) {
	t0 := time.Date(2026, 7, 1, 0, 0, 0, 0, time.UTC)
	var tl []Point
	for i := range 30 {
		p := Point{At: t0.AddDate(0, 0, i), ConditionNumber: 10 + float64(i), MaxVIF: 2, Rank: 5, Columns: 4}
		p.Judged = p.ConditionNumber
		if i >= 25 {
			// An exact dependency from day 25 leaves two columns: no
			// condition number to judge.
			p.Rank, p.Judged = 4, math.Inf(1)
		}
		tl = append(tl, p)
	}
	c := timelineChart("x", MetricCondition, tl, nil, 15, 30)
	// The log axis reaches the next power of ten above 1.5 × critical.
	if c.YTicks[0].Label != "1" || c.YTicks[len(c.YTicks)-1].Label != "100" {
		t.Errorf("y ticks %v", c.YTicks)
	}
	if len(c.Levels) != 2 || c.Levels[0].Name != "warn" || c.Levels[1].Name != "critical" {
		t.Errorf("levels %+v", c.Levels)
	}
	// The five rank-deficient days form one clipped stretch.
	if len(c.Clipped) != 1 || !c.Clipped[0].From.Equal(tl[25].At) || !c.Clipped[0].To.Equal(tl[29].At) {
		t.Errorf("clipped %+v", c.Clipped)
	}
	// Weekly ticks on Mondays: July 6, 13, 20, 27 of 2026.
	for _, tk := range c.XTicks {
		if tk.Label != "Jul 6" && tk.Label != "Jul 13" && tk.Label != "Jul 20" && tk.Label != "Jul 27" {
			t.Errorf("x tick %q", tk.Label)
		}
	}
}
