package connectors

import (
	"strings"
	"testing"
)

func TestRedact(t *testing.T) {
	for in, want := range map[string]string{
		"postgres://plumb:s3cret@db:5432/water":           "postgres://plumb:xxxxx@db:5432/water",
		"postgres://plumb:p@ss@db/water":                  "postgres://plumb:xxxxx@db/water",
		"postgres://plumb@db/water?password=s3cret&x=1":   "postgres://plumb@db/water?password=xxxxx&x=1",
		"host=db user=plumb password=s3cret dbname=water": "host=db user=plumb password=xxxxx dbname=water",
		"host=db password='s3 cret' dbname=water":         "host=db password=xxxxx dbname=water",
		"postgres://db/water":                             "postgres://db/water",
		"sqlite:/var/lib/plumb/demand.db":                 "sqlite:/var/lib/plumb/demand.db",
	} {
		got := Redact(in)
		if got != want {
			t.Errorf("Redact(%q) = %q, want %q", in, got, want)
		}
		for _, pw := range []string{"s3cret", "p@ss", "s3 cret"} {
			if strings.Contains(got, pw) {
				t.Errorf("Redact(%q) = %q still holds the password", in, got)
			}
		}
	}
}
