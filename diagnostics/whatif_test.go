package diagnostics

import (
	"slices"
	"strings"
	"testing"
)

// The suggested drops start with the column that each exact dependency's
// equation expresses (its dependent), constants first, in the order of
// Report.Dependencies: total_connections for
// total_connections = 1·residential_connections + 1·commercial_connections + 0,
// never one of its parts; zone_d for the last dummy of a full set beside the
// intercept. Regression: the search that scored every column of a
// dependency suggested residential_connections on the first table (where
// residential_connections also tracks population_served) and zone_b on the
// second.
func TestSuggestedDropsNameDependent(t *testing.T) {
	cases := []struct {
		name   string
		seed   uint64
		n      int
		cols   []string
		prefix []string // the suggestion starts with these
		never  []string
	}{
		{"total beside its parts", 1, 3000,
			[]string{"temperature", "rainfall", "population_served", "residential_connections", "commercial_connections", "total_connections", "pipe_age"},
			[]string{"total_connections"}, []string{"residential_connections", "commercial_connections"}},
		{"whole table", 5, 3000, waterColumns,
			[]string{"pressure_z3", "total_connections", "pressure_z2", "zone_d"},
			[]string{"commercial_connections", "zone_a", "zone_b", "zone_c"}},
	}
	for _, tc := range cases {
		names, rows := waterTable(tc.seed, tc.n)
		m, q := feedRows(names, rows, 400)
		qr, cp := analyzeBoth(t, m, q, Options{Columns: tc.cols})
		for _, rep := range []*Report{qr, cp} {
			var deps []string
			for _, d := range rep.Dependencies {
				if d.Kind == KindExact {
					deps = append(deps, d.Dependent)
				}
			}
			if !slices.Equal(deps, tc.prefix) {
				t.Fatalf("%s, %s path: dependents %v, want %v", tc.name, rep.Path, deps, tc.prefix)
			}
			got := rep.SuggestedDrops
			if len(got) < len(tc.prefix) || !slices.Equal(got[:len(tc.prefix)], tc.prefix) {
				t.Errorf("%s, %s path: suggested drops %v, want them to start with %v", tc.name, rep.Path, got, tc.prefix)
			}
			for _, c := range tc.never {
				if slices.Contains(got, c) {
					t.Errorf("%s, %s path: suggested drops %v name %s, a column the equation is made of", tc.name, rep.Path, got, c)
				}
			}
			if !strings.Contains(rep.DropCaution, "omitted-variable bias") {
				t.Errorf("%s, %s path: caution %q", tc.name, rep.Path, rep.DropCaution)
			}
			t.Logf("%s, %s path: suggested drops %v", tc.name, rep.Path, got)
		}
	}
}
