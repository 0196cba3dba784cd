package connectors

import (
	"encoding/json"
	"fmt"
	"strconv"
	"strings"
	"unicode"
	"unicode/utf8"
)

// Segment keys. Every series a scan produces, and every series the agent
// stores, shows and alerts on, has one string key:
//
//   - WholeTable ("") for the whole table;
//   - SegmentKey(v), that is SegmentPrefix+v, for the rows whose segment
//     column holds v — any text, the empty string included;
//   - NullSegment for the rows whose segment column is NULL.
//
// A value's key always starts with SegmentPrefix and NullSegment does not,
// so no value can pass for NULL or for the whole table. Keys sort with the
// whole table first, then the values in their own order, then NULL. Only
// this file encodes and decodes them; stores keep the key, surfaces show
// Segment's Label or JSON form.
const (
	WholeTable    = ""
	SegmentPrefix = "="
	NullSegment   = "~null"
)

// SegmentKey returns the key of the segment whose column holds value.
func SegmentKey(value string) string { return SegmentPrefix + value }

// AppendSegmentKey appends the key of value to dst.
func AppendSegmentKey(dst, value []byte) []byte {
	return append(append(dst, SegmentPrefix...), value...)
}

// Segment is a decoded series key.
type Segment struct {
	Whole bool   // the whole table
	Null  bool   // the rows whose segment column is NULL
	Value string // the segment column's value otherwise
}

// ParseSegmentKey decodes a key. A key of neither form (none is written
// since keys were introduced) is read as a value.
func ParseSegmentKey(key string) Segment {
	switch {
	case key == WholeTable:
		return Segment{Whole: true}
	case key == NullSegment:
		return Segment{Null: true}
	}
	return Segment{Value: strings.TrimPrefix(key, SegmentPrefix)}
}

// Key encodes s.
func (s Segment) Key() string {
	switch {
	case s.Whole:
		return WholeTable
	case s.Null:
		return NullSegment
	}
	return SegmentKey(s.Value)
}

// NullLabel is the label of the NULL segment.
const NullLabel = "NULL"

// Label names s for a person, in text output, addresses and command-line
// flags: "" for the whole table, NULL for NULL, and the value as it is —
// quoted, Go-style, when it is empty, reads NULL, starts with a quote or
// holds a character that is not printable (a control character, say).
// ParseSegmentLabel reads it back.
func (s Segment) Label() string {
	switch {
	case s.Whole:
		return ""
	case s.Null:
		return NullLabel
	}
	v := s.Value
	if v == "" || v == NullLabel || strings.HasPrefix(v, `"`) || !utf8.ValidString(v) ||
		strings.IndexFunc(v, func(r rune) bool { return !unicode.IsPrint(r) && r != ' ' }) >= 0 {
		return strconv.Quote(v)
	}
	return v
}

// String is Label, with the whole table named.
func (s Segment) String() string {
	if s.Whole {
		return "whole table"
	}
	return s.Label()
}

// ParseSegmentLabel reads a label: "" is the whole table, NULL the NULL
// segment, a Go-quoted string a value, anything else the value itself.
func ParseSegmentLabel(label string) (Segment, error) {
	switch {
	case label == "":
		return Segment{Whole: true}, nil
	case label == NullLabel:
		return Segment{Null: true}, nil
	case strings.HasPrefix(label, `"`):
		v, err := strconv.Unquote(label)
		if err != nil {
			return Segment{}, fmt.Errorf("segment %s: a quoted segment value must be a complete Go string literal", label)
		}
		return Segment{Value: v}, nil
	}
	return Segment{Value: label}, nil
}

// SegmentLabel is the label of a key.
func SegmentLabel(key string) string { return ParseSegmentKey(key).Label() }

// KeyOfLabel returns the key a label names.
func KeyOfLabel(label string) (string, error) {
	s, err := ParseSegmentLabel(label)
	if err != nil {
		return "", err
	}
	return s.Key(), nil
}

// SegmentJSON is how JSON documents name a series: the whole table has
// "whole_table": true and no "segment"; a segment has "segment" with its
// value as a string (the empty string included) or null for NULL. Embed
// it in the JSON form of a type and fill it with SegmentJSONOf.
//
// Both keys are always present, so every series has a "segment": the whole
// table is {"whole_table": true, "segment": null}; a segment is
// {"whole_table": false, "segment": VALUE} with null for NULL.
type SegmentJSON struct {
	WholeTable bool         `json:"whole_table"`
	Segment    segmentValue `json:"segment"`
}

// SegmentJSONOf returns the JSON form of a key.
func SegmentJSONOf(key string) SegmentJSON {
	s := ParseSegmentKey(key)
	if s.Whole {
		return SegmentJSON{WholeTable: true}
	}
	return SegmentJSON{Segment: segmentValue{set: true, null: s.Null, v: s.Value}}
}

// Key returns the key a decoded SegmentJSON names. A document with neither
// field names the whole table.
func (j SegmentJSON) Key() string {
	if j.WholeTable || !j.Segment.set {
		return WholeTable
	}
	if j.Segment.null {
		return NullSegment
	}
	return SegmentKey(j.Segment.v)
}

// segmentValue is the "segment" field: a string, or null for NULL.
type segmentValue struct {
	set, null bool
	v         string
}

func (s segmentValue) IsZero() bool { return !s.set }

func (s segmentValue) MarshalJSON() ([]byte, error) {
	if s.null || !s.set {
		return []byte("null"), nil
	}
	return json.Marshal(s.v)
}

func (s *segmentValue) UnmarshalJSON(b []byte) error {
	s.set = true
	if string(b) == "null" {
		s.null = true
		return nil
	}
	return json.Unmarshal(b, &s.v)
}
