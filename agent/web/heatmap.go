package web

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// heatMap is the correlation matrix drawn as coloured cells.
type heatMap struct {
	ID, Title, Desc string
	W, H            float64
	X0, Y0, Cell    float64
	Labels          []heatLabel
	Cells           []heatCell
	Scale           []heatStop
	ScaleY          float64
	ScaleTicks      []tick
	Order           []string
}

type heatLabel struct {
	Name string
	Pos  float64 // centre of its row and column
}

type heatCell struct {
	X, Y     float64
	Fill     string
	Text     string
	TextFill string
	Title    string
}

type heatStop struct {
	X, W float64
	Fill string
}

// clusterOrder orders the columns of the correlation matrix r so that
// related ones sit together: agglomerative clustering with average linkage
// on the distance 1 − |r_ij| (strongly correlated columns of either sign
// are close), the leaves read left to right. At each merge the cluster
// holding the lower original index goes first, so the order is
// deterministic and keeps the original order among unrelated columns.
func clusterOrder(r [][]float64) []int {
	n := len(r)
	type cluster struct {
		members []int // leaves in display order
		first   int
	}
	cs := make([]*cluster, n)
	for i := range cs {
		cs[i] = &cluster{members: []int{i}, first: i}
	}
	dist := func(a, b *cluster) float64 {
		s := 0.0
		for _, i := range a.members {
			for _, j := range b.members {
				v := r[i][j]
				if math.IsNaN(v) {
					v = 0
				}
				s += 1 - math.Abs(v)
			}
		}
		return s / float64(len(a.members)*len(b.members))
	}
	for len(cs) > 1 {
		bi, bj, best := 0, 1, math.Inf(1)
		for i := 0; i < len(cs); i++ {
			for j := i + 1; j < len(cs); j++ {
				if d := dist(cs[i], cs[j]); d < best-1e-12 {
					bi, bj, best = i, j, d
				}
			}
		}
		a, b := cs[bi], cs[bj]
		if b.first < a.first {
			a, b = b, a
		}
		// Put the ends that correlate most next to each other.
		last, firstB := a.members[len(a.members)-1], b.members[0]
		lastB := b.members[len(b.members)-1]
		if math.Abs(r[last][lastB]) > math.Abs(r[last][firstB])+1e-12 {
			rev := make([]int, len(b.members))
			for k, m := range b.members {
				rev[len(rev)-1-k] = m
			}
			b.members = rev
		}
		merged := &cluster{members: append(append([]int{}, a.members...), b.members...), first: min(a.first, b.first)}
		cs[bi] = merged
		cs = append(cs[:bj], cs[bj+1:]...)
	}
	if n == 0 {
		return nil
	}
	return cs[0].members
}

// heatColour maps a correlation in [−1, 1] onto Tol's BuRd.
func heatColour(v float64) string {
	if math.IsNaN(v) {
		return "#FFEE99" // Tol's colour for bad data
	}
	v = math.Max(-1, math.Min(1, v))
	f := (v + 1) / 2 * float64(len(tolBuRd)-1)
	i := int(math.Floor(f))
	if i >= len(tolBuRd)-1 {
		return tolBuRd[len(tolBuRd)-1]
	}
	return mixHex(tolBuRd[i], tolBuRd[i+1], f-float64(i))
}

func mixHex(a, b string, t float64) string {
	pa, pb := parseHex(a), parseHex(b)
	var out [3]int
	for k := range out {
		out[k] = int(math.Round(float64(pa[k])*(1-t) + float64(pb[k])*t))
	}
	return fmt.Sprintf("#%02X%02X%02X", out[0], out[1], out[2])
}

func parseHex(s string) [3]int {
	v, _ := strconv.ParseUint(strings.TrimPrefix(s, "#"), 16, 32)
	return [3]int{int(v >> 16 & 0xff), int(v >> 8 & 0xff), int(v & 0xff)}
}

// luminance is the relative luminance (WCAG) of a hex colour, to pick the
// text colour on a cell.
func luminance(s string) float64 {
	p := parseHex(s)
	lin := func(c int) float64 {
		x := float64(c) / 255
		if x <= 0.03928 {
			return x / 12.92
		}
		return math.Pow((x+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(p[0]) + 0.7152*lin(p[1]) + 0.0722*lin(p[2])
}

// correlationMap lays out the correlation matrix of names, reordered by
// clusterOrder. constant marks columns whose correlations are undefined.
func correlationMap(id string, names []string, r [][]float64, constant map[string]bool) *heatMap {
	n := len(names)
	order := clusterOrder(r)
	cell := math.Min(46, math.Max(14, 560/math.Max(float64(n), 1)))
	h := &heatMap{ID: id, Title: "Correlation matrix", Cell: cell, X0: 190, Y0: 170}
	h.W = h.X0 + cell*float64(n) + 150 // room for the last column's slanted label
	h.W = math.Max(h.W, h.X0+560)
	h.ScaleY = h.Y0 + cell*float64(n) + 28
	h.H = h.ScaleY + 48
	h.Desc = fmt.Sprintf("Pearson correlations of %d columns, ordered by average-linkage clustering on 1 − |r|", n)
	for k, i := range order {
		h.Order = append(h.Order, names[i])
		h.Labels = append(h.Labels, heatLabel{Name: names[i], Pos: float64(k)*cell + cell/2})
	}
	showText := cell >= 24
	for a, i := range order {
		for b, j := range order {
			v := r[i][j]
			undefined := i != j && (constant[names[i]] || constant[names[j]])
			c := heatCell{X: h.X0 + float64(b)*cell, Y: h.Y0 + float64(a)*cell, Fill: heatColour(v)}
			c.Title = fmt.Sprintf("r(%s, %s) = %s", names[i], names[j], fmtCorr(v))
			if undefined {
				c.Fill = "#FFFFFF"
				c.Title = fmt.Sprintf("r(%s, %s) undefined: a column is constant", names[i], names[j])
			}
			if showText {
				c.Text = fmtCorr(v)
				if undefined {
					c.Text = "·"
				}
				c.TextFill = colBlack
				if luminance(c.Fill) < 0.25 {
					c.TextFill = "#FFFFFF"
				}
			}
			h.Cells = append(h.Cells, c)
		}
	}
	const steps = 40
	w := 300.0 / steps
	for k := 0; k < steps; k++ {
		v := -1 + 2*(float64(k)+0.5)/steps
		h.Scale = append(h.Scale, heatStop{X: h.X0 + float64(k)*w, W: w + 0.3, Fill: heatColour(v)})
	}
	for _, v := range []float64{-1, -0.5, 0, 0.5, 1} {
		h.ScaleTicks = append(h.ScaleTicks, tick{Pos: h.X0 + (v+1)/2*300, Label: fmtCorr(v)})
	}
	return h
}

// fmtCorr writes a correlation with two decimals and a true minus sign,
// without the leading zero: ".97", "−.45", ".996", "1".
func fmtCorr(v float64) string {
	if math.IsNaN(v) {
		return "—"
	}
	if math.Abs(v) >= 0.9995 {
		if v < 0 {
			return "−1"
		}
		return "1"
	}
	digits := 2
	if math.Abs(v) >= 0.99 { // near-copies: keep the digit that tells them apart
		digits = 3
	}
	s := strconv.FormatFloat(math.Abs(v), 'f', digits, 64)
	s = strings.TrimPrefix(s, "0")
	if s == ".00" {
		return "0"
	}
	if v < 0 {
		return "−" + s
	}
	return s
}
