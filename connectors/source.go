// Package connectors defines how plumb reads a database: the Source
// interface, the request that names a table or query and its columns, column
// discovery and the accumulated result. Implementations live in
// connectors/postgres and connectors/sqlite and register themselves by URL
// scheme; optional fast paths (pushdown, partitioned scans) are discovered by
// type assertion.
package connectors

import (
	"context"
	"fmt"
	"regexp"
	"sort"
	"strings"
	"sync"
	"time"

	"plumb/stream"
)

// Kind classifies a column's database type for plumb.
type Kind int

const (
	KindOther   Kind = iota // not usable (json, bytea, blobs, …)
	KindNumeric             // integers, floats, numeric/decimal
	KindBool                // booleans: a factor with levels "false" and "true"
	KindTime                // date, timestamp, timestamptz, or SQLite time text / unix seconds
	// KindText: text, varchar, char(n), name, citext and enum types in
	// PostgreSQL; TEXT affinity (or text values in a column of no declared
	// type) in SQLite. A factor when named in Request.Columns.
	KindText
)

func (k Kind) String() string {
	switch k {
	case KindNumeric:
		return "numeric"
	case KindBool:
		return "boolean"
	case KindTime:
		return "time"
	case KindText:
		return "text"
	}
	return "other"
}

// Column describes one column of a table or query result.
type Column struct {
	Name string
	Type string // the database's own type name, e.g. "double precision", "INTEGER"
	Kind Kind
	// Levels is, for a text column left out of a scan (Result.Skipped),
	// its number of distinct non-NULL values where a source can tell
	// cheaply (PostgreSQL: the planner's statistics; SQLite: among the
	// first 100000 rows), up to Request.MaxLevels+1 (LevelsMore: the count
	// stopped there, more levels than a factor may have); 0 when not
	// counted.
	Levels     int
	LevelsMore bool
}

// IsFactor reports whether the column, when accumulated, is a categorical
// factor: a text or boolean column, expanded into one indicator column per
// level (see Factor).
func (c Column) IsFactor() bool { return c.Kind == KindText || c.Kind == KindBool }

// Factor is a categorical column of a result. It is accumulated as one
// indicator (0/1) column per level, named stream.IndicatorName(Name, level), in
// the factor's place among the columns, its levels in byte order; every
// level seen is kept (no base level is dropped: that is the analysis's
// choice).
type Factor struct {
	Name   string
	Levels []string // sorted; every level seen in the result
	Null   int64    // rows dropped because this column was NULL
}

// DefaultMaxCells bounds the cells of a pushdown with factors (see
// Request.MaxCells).
const DefaultMaxCells = 10000

// DefaultMaxLevels bounds the distinct values (levels) of a factor.
const DefaultMaxLevels = 50

// Request says what to read.
type Request struct {
	Table   string   // "name" or "schema.name"; exclusive with Query
	Query   string   // a SELECT run as given inside a read-only transaction
	Where   string   // optional filter, appended as WHERE (…)
	Columns []string // the columns to accumulate, in order (a target last)
	Weight  string   // optional weight column

	TimeColumn  string         // optional; with Bucket, one accumulator per bucket
	Bucket      string         // hour, day, week, month
	Location    *time.Location // bucket boundaries; nil means UTC
	Segment     string         // optional segment column: one accumulator per value
	MaxSegments int            // bound on distinct segments; 0 means DefaultMaxSegments
	// MaxLevels bounds the levels of each factor (text and boolean
	// columns); 0 means DefaultMaxLevels. A factor with more is an error
	// wrapping ErrTooManyLevels.
	MaxLevels int

	SamplePct float64 // 0 or 100 means every row
	Seed      int64

	// Centres, optional, are provisional centres per column (e.g. a
	// watch's previous means) that a pushdown shifts the values by where
	// the database has no statistics.
	Centres map[string]float64
	// MaxCells bounds, for a pushdown with factors, the cells (bucket ×
	// segment × level combinations) one partition's aggregate may return;
	// beyond it the scan streams the rows instead and says so
	// (Result.Fallback). 0 means DefaultMaxCells.
	MaxCells int

	QR bool // accumulate the QR factor as well as the moments
	// Extended keeps the QR factor in double-double (stream.NewQRExtended):
	// about ten times slower, for data whose float64 factor cannot be
	// trusted. It implies QR.
	Extended bool

	// Progress, when set, is called from the scanning goroutine now and then
	// with the rows read so far and the total expected (0 when unknown).
	Progress func(read, total int64)
}

// DefaultMaxSegments bounds the distinct values of a segment column.
const DefaultMaxSegments = 1000

// Key names one accumulator of a result: a bucket start (zero without
// bucketing) and a segment value ("" without segmenting).
type Key struct {
	Bucket  time.Time
	Segment string
}

// Group is the accumulated data of one key.
type Group struct {
	Key     Key
	Moments *stream.Moments
	QR      *stream.QR // nil unless Request.QR
}

// Result is what a scan produced.
type Result struct {
	// Columns are the accumulated columns in request order, each factor
	// expanded in its place into its indicator columns (IndicatorName), one
	// per level of Factors. Every group holds all of them.
	Columns []string
	Factors []Factor // the factors among the requested columns, in request order
	Groups  []Group  // sorted by bucket, then segment
	Read    int64    // rows read from the database
	Sampled bool     // rows were sampled (SamplePct)
	Inexact []int64  // per column: values that did not fit float64 exactly

	Skipped    []Column // columns found by discovery but not numeric, with their types
	NoTime     int64    // rows left out because their time column was NULL or ±infinity
	Partitions int      // ranges scanned at once (1 for a plain scan)
	Pushdown   bool     // the sums were computed inside the database
	// Fallback says why a pushdown streamed the rows instead ("" when it
	// did not).
	Fallback string
}

// Merged returns one group holding all groups merged (the whole table).
// Groups over fewer columns (fewer levels of a factor) are widened to
// Columns first (Align).
func (r *Result) Merged() Group {
	g := Group{Moments: stream.NewMoments(r.Columns)}
	for _, x := range Align(r.Groups, r.Columns) {
		g.Moments.Merge(x.Moments)
		if x.QR != nil {
			if g.QR == nil {
				if x.QR.Extended() {
					g.QR = stream.NewQRExtended(r.Columns)
				} else {
					g.QR = stream.NewQR(r.Columns)
				}
			}
			g.QR.Merge(x.QR)
		}
	}
	return g
}

// SortGroups orders groups by bucket, then segment.
func SortGroups(gs []Group) {
	sort.Slice(gs, func(i, j int) bool {
		if !gs[i].Key.Bucket.Equal(gs[j].Key.Bucket) {
			return gs[i].Key.Bucket.Before(gs[j].Key.Bucket)
		}
		return gs[i].Key.Segment < gs[j].Key.Segment
	})
}

// Source is a database plumb can read.
type Source interface {
	// Describe lists the columns of the request's table or query.
	Describe(ctx context.Context, req Request) ([]Column, error)
	// Scan reads the requested columns and accumulates them.
	Scan(ctx context.Context, req Request) (*Result, error)
	// Close releases the connection(s).
	Close() error
}

// Estimator is an optional fast path: a cheap estimate of the rows a scan
// of the request will read (0 when unknown), e.g. from planner statistics.
type Estimator interface {
	Estimate(ctx context.Context, req Request) (int64, error)
}

// Opener opens a Source from a URL.
type Opener func(ctx context.Context, url string, opts Options) (Source, error)

// Options are connection settings shared by every source.
type Options struct {
	StatementTimeout time.Duration // 0 means the source's default
	Parallel         int           // partitions scanned at once, where supported
	Pushdown         bool          // compute the aggregate in the database, where supported
	AppName          string        // application name reported to the server; "" means "plumb"
}

var (
	regMu   sync.RWMutex
	openers = map[string]Opener{}
)

// Register makes an opener available for a URL scheme ("sqlite",
// "postgres"). It panics when the scheme is taken.
func Register(scheme string, o Opener) {
	regMu.Lock()
	defer regMu.Unlock()
	if _, dup := openers[scheme]; dup {
		panic("connectors: scheme registered twice: " + scheme)
	}
	openers[scheme] = o
}

// Open opens the source named by url, choosing the connector by scheme
// ("sqlite:PATH", "postgres://…", "postgresql://…").
func Open(ctx context.Context, url string, opts Options) (Source, error) {
	scheme, _, ok := strings.Cut(url, ":")
	if !ok {
		return nil, fmt.Errorf("database %q: want sqlite:PATH or postgres://…", Redact(url))
	}
	if scheme == "postgresql" {
		scheme = "postgres"
	}
	regMu.RLock()
	o := openers[scheme]
	regMu.RUnlock()
	if o == nil {
		return nil, fmt.Errorf("database %q: no connector for scheme %q (want sqlite or postgres)", Redact(url), scheme)
	}
	return o(ctx, url, opts)
}

// Redact returns a database URL or key=value connection string with any
// password replaced by "xxxxx", for messages: the user:password@ part, a
// password query parameter, and a password=… setting.
func Redact(url string) string {
	if scheme, rest, ok := strings.Cut(url, "://"); ok {
		if at := strings.LastIndex(rest, "@"); at >= 0 {
			auth := rest[:at]
			if user, _, hasPass := strings.Cut(auth, ":"); hasPass {
				rest = user + ":xxxxx" + rest[at:]
			}
		}
		url = scheme + "://" + rest
	}
	return passwordSetting.ReplaceAllString(url, "${1}xxxxx")
}

// passwordSetting matches password=… in a query string or a key=value
// connection string ('…' quoted or up to the next separator).
var passwordSetting = regexp.MustCompile(`((?:^|[?&\s])password\s*=\s*)('(?:[^'\\]|\\.)*'|[^&\s]*)`)
