package connectors

import "errors"

// Sentinel errors wrapped by the connectors' messages; test with errors.Is.
var (
	// ErrNotFound: a named table, view or column does not exist.
	ErrNotFound = errors.New("not found")
	// ErrColumnType: a named column has a type plumb cannot accumulate.
	ErrColumnType = errors.New("unusable column type")
	// ErrBadValue: a value that cannot be read as a number or a time, e.g.
	// text stored in a numeric SQLite column.
	ErrBadValue = errors.New("bad value")
	// ErrIdentifier: a table or column name that does not parse.
	ErrIdentifier = errors.New("bad identifier")
	// ErrFragment: a --where or --query text that would not stay one
	// expression or one statement.
	ErrFragment = errors.New("bad SQL text")
	// ErrTooManySegments: the segment column has more distinct values than
	// the request allows.
	ErrTooManySegments = errors.New("too many segments")
	// ErrTooManyLevels: a factor (text or boolean column) has more distinct
	// values than the request allows.
	ErrTooManyLevels = errors.New("too many levels")
	// ErrUnsupported: the request asks for something this source cannot do.
	ErrUnsupported = errors.New("unsupported")
	// ErrInsufficient: the scan produced too little data to diagnose.
	ErrInsufficient = errors.New("insufficient data")
)
