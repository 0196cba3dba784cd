package agent

import (
	"encoding/json"

	"plumb/connectors"
)

// The JSON forms of the types that carry a series key (the webhook
// payload, points, alerts) name their series as connectors.SegmentJSON
// does: "whole_table": true, or "segment" with the value (the empty string
// included) or null for NULL.

type notificationFields Notification // without methods

func (n Notification) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		notificationFields
		connectors.SegmentJSON
		Segments []json.RawMessage `json:"segments,omitempty"`
	}{notificationFields(n), connectors.SegmentJSONOf(n.Segment), segmentValues(n.Segments)})
}

func (n *Notification) UnmarshalJSON(b []byte) error {
	var v struct {
		*notificationFields
		connectors.SegmentJSON
		Segments []json.RawMessage `json:"segments"`
	}
	v.notificationFields = (*notificationFields)(n)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	n.Segment = v.SegmentJSON.Key()
	n.Segments = nil
	for _, raw := range v.Segments {
		var one connectors.SegmentJSON
		if err := json.Unmarshal([]byte(`{"segment":`+string(raw)+`}`), &one); err != nil {
			return err
		}
		n.Segments = append(n.Segments, one.Key())
	}
	return nil
}

// segmentValues are the JSON values of segment keys: the value as a
// string, null for NULL.
func segmentValues(keys []string) []json.RawMessage {
	var out []json.RawMessage
	for _, k := range keys {
		b, _ := json.Marshal(connectors.SegmentJSONOf(k).Segment)
		out = append(out, b)
	}
	return out
}

type pointFields Point // without methods

func (p Point) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		pointFields
		connectors.SegmentJSON
	}{pointFields(p), connectors.SegmentJSONOf(p.Segment)})
}

func (p *Point) UnmarshalJSON(b []byte) error {
	var v struct {
		*pointFields
		connectors.SegmentJSON
	}
	v.pointFields = (*pointFields)(p)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	p.Segment = v.SegmentJSON.Key()
	return nil
}

type alertFields Alert // without methods

func (a Alert) MarshalJSON() ([]byte, error) {
	return json.Marshal(struct {
		alertFields
		connectors.SegmentJSON
	}{alertFields(a), connectors.SegmentJSONOf(a.Segment)})
}

func (a *Alert) UnmarshalJSON(b []byte) error {
	var v struct {
		*alertFields
		connectors.SegmentJSON
	}
	v.alertFields = (*alertFields)(a)
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	a.Segment = v.SegmentJSON.Key()
	return nil
}
