package web

import (
	"encoding/json"

	"plumb/connectors"
	"plumb/diagnostics"
)

// The JSON forms of the types that carry a series key: the key is shown
// decoded, as connectors.SegmentJSON ("whole_table": true, or "segment":
// the value or null for NULL), so that the empty string, NULL and the
// whole table stay apart.

type segmentSummaryFields SegmentSummary // without methods

func (s SegmentSummary) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		connectors.SegmentJSON
		segmentSummaryFields
	}{connectors.SegmentJSONOf(s.Segment), segmentSummaryFields(s)})
}

func (s *SegmentSummary) UnmarshalJSON(b []byte) error {
	var v struct {
		connectors.SegmentJSON
		*segmentSummaryFields
	}
	v.segmentSummaryFields = (*segmentSummaryFields)(s)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	s.Segment = v.SegmentJSON.Key()
	return nil
}

// segmentDetailFields are SegmentDetail's own fields; SegmentSummary's
// MarshalJSON would otherwise stand for the whole detail.
type segmentDetailFields struct {
	Timeline  []Point             `json:"timeline"`
	Forecasts []Forecast          `json:"forecasts"`
	Report    *diagnostics.Report `json:"report"`
	Factors   []Factor            `json:"factors"`
	NewLevels []NewLevel          `json:"new_levels"`
}

func (d SegmentDetail) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		connectors.SegmentJSON
		segmentSummaryFields
		segmentDetailFields
	}{connectors.SegmentJSONOf(d.Segment), segmentSummaryFields(d.SegmentSummary),
		segmentDetailFields{d.Timeline, d.Forecasts, d.Report, nonNil(d.Factors), nonNil(d.NewLevels)}})
}

func (d *SegmentDetail) UnmarshalJSON(b []byte) error {
	var v struct {
		connectors.SegmentJSON
		*segmentSummaryFields
		segmentDetailFields
	}
	v.segmentSummaryFields = (*segmentSummaryFields)(&d.SegmentSummary)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	d.Segment = v.SegmentJSON.Key()
	d.Timeline, d.Forecasts, d.Report = v.Timeline, v.Forecasts, v.Report
	d.Factors, d.NewLevels = v.Factors, v.NewLevels
	return nil
}

type alertFields Alert // without methods

func (a Alert) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		connectors.SegmentJSON
		alertFields
	}{connectors.SegmentJSONOf(a.Segment), alertFields(a)})
}

func (a *Alert) UnmarshalJSON(b []byte) error {
	var v struct {
		connectors.SegmentJSON
		*alertFields
	}
	v.alertFields = (*alertFields)(a)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	a.Segment = v.SegmentJSON.Key()
	return nil
}
