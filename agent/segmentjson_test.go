package agent

import (
	"encoding/json"
	"slices"
	"strings"
	"testing"

	"plumb/connectors"
)

// The webhook body names the whole table, the empty string, NULL and a
// value apart, and reads back to the same keys.
func TestNotificationSegmentJSON(t *testing.T) {
	for _, c := range []struct {
		key, want string
	}{
		{connectors.WholeTable, `"whole_table":true,"segment":null`},
		{connectors.SegmentKey(""), `"segment":""`},
		{connectors.NullSegment, `"segment":null`},
		{connectors.SegmentKey("hillside"), `"segment":"hillside"`},
		{connectors.SegmentKey("(null)"), `"segment":"(null)"`},
	} {
		n := Notification{ID: "e1", Watch: "district_daily", Segment: c.key}
		if c.key == connectors.SegmentKey("hillside") {
			n.Segments = []string{c.key, connectors.SegmentKey(""), connectors.NullSegment}
		}
		b, err := json.Marshal(n)
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(b), c.want) {
			t.Errorf("%q: %s lacks %s", c.key, b, c.want)
		}
		if c.key != connectors.WholeTable && !strings.Contains(string(b), `"whole_table":false`) {
			t.Errorf("%q: a segment marked as the whole table: %s", c.key, b)
		}
		if n.Segments != nil && !strings.Contains(string(b), `"segments":["hillside","",null]`) {
			t.Errorf("segments list: %s", b)
		}
		var back Notification
		if err := json.Unmarshal(b, &back); err != nil || back.Segment != c.key || !slices.Equal(back.Segments, n.Segments) || back.ID != "e1" {
			t.Errorf("%q: read back %q %q (%v)", c.key, back.Segment, back.Segments, err)
		}
	}
}
