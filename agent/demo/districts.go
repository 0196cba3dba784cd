// Package demo generates plumb's own scenario: a water utility's daily
// demand feature table per supply district. The data are invented, drawn
// from a fixed seed, and carry three stories that plumb should notice:
//
//   - metered and billed volume converge as smart meters roll out (half of
//     the accounts are billed on a reading around RolloutDay), so their
//     VIFs drift upward day after day;
//   - from ChangeDay on, an upstream change writes total_connections as the
//     exact sum of residential and commercial connections (before it, the
//     total also counted a varying number of other connections);
//   - the pressure sensor of one district sticks from StuckDay on;
//   - each district draws its water from a mix of sources (supply_source,
//     a text column), and from DoseDay on the treatment works dose chlorine
//     by source alone: chlorine_mg_l becomes a function of supply_source,
//     an exact dependency between a factor and a numeric column. From
//     NewSourceDay on one district also receives desalinated water, a
//     level the table has not held before.
//
// Apart from these stories the columns are not collinear, within a
// district or with the districts pooled: the districts are laid out to a
// similar size (as district metered areas usually are; common practice,
// no source), so that their level differences do not turn the pooled
// table's district-level columns into copies of one another, and where
// they differ they differ along orthogonal contrasts.
package demo

import (
	"context"
	"database/sql"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	_ "modernc.org/sqlite" // the one SQLite driver of the process
)

// Table is the name of the generated feature table.
const Table = "district_daily"

// Target is the table's response column, the water put into supply.
const Target = "demand_m3"

// Scenario fixes the shape of the generated data.
type Scenario struct {
	Seed          uint64
	Start         time.Time // first day (UTC)
	Days          int
	Districts     []string
	RolloutDay    int // day index by which half of the accounts are billed on a meter reading
	ChangeDay     int // day index from which total_connections is an exact sum
	StuckDay      int // day index from which StuckDistrict's pressure is constant
	StuckDistrict string
	DoseDay       int    // day index from which chlorine_mg_l is fixed by supply_source
	NewSourceDay  int    // day index from which NewSourceIn also draws on NewSource
	NewSource     string // a supply source first seen on NewSourceDay
	NewSourceIn   string // the district that receives it
}

// Sources are the supply sources of the scenario before NewSource, with
// the chlorine dose (mg/l) the treatment works sets for each from DoseDay.
var Sources = []struct {
	Name string
	Dose float64
}{{"blended", 0.65}, {"groundwater", 0.5}, {"reservoir", 0.8}}

// newSourceDose is the dose of the new source from DoseDay.
const newSourceDose = 0.6

// Default is the scenario of plumb's demo and built-in sample.
var Default = Scenario{
	Seed:          20260601,
	Start:         time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC),
	Days:          120,
	Districts:     []string{"harbour", "hillside", "northfield", "riverside"},
	RolloutDay:    62,
	ChangeDay:     70,
	StuckDay:      85,
	StuckDistrict: "hillside",
	DoseDay:       96,
	NewSourceDay:  104,
	NewSource:     "desalinated",
	NewSourceIn:   "harbour",
}

// Row is one district-day.
type Row struct {
	Day                    time.Time
	District               string
	TemperatureC           float64
	RainfallMM             float64
	PopulationServed       int64
	ResidentialConnections int64
	CommercialConnections  int64
	TotalConnections       int64
	PipeAgeYears           float64
	PressureBar            float64
	MeteredVolumeM3        float64
	BilledVolumeM3         float64
	SupplySource           string
	ChlorineMgL            float64
	DemandM3               float64
}

// contrasts place the districts' levels: the centered columns of this
// 4×3 pattern are orthogonal, so that pooled over four districts the
// level differences of different columns are uncorrelated.
var contrasts = [4][3]float64{{1, 1, -1}, {1, -1, 1}, {-1, 1, 1}, {-1, -1, -1}}

// Rows generates the scenario's rows, day by day, districts in order.
func (s Scenario) Rows() []Row {
	rng := rand.New(rand.NewPCG(s.Seed, s.Seed^0x9e3779b97f4a7c15))
	type district struct {
		res, com, perConn, growth, age, pressure float64
	}
	ds := make([]district, len(s.Districts))
	for i := range ds {
		c := contrasts[i%len(contrasts)]
		ds[i] = district{
			res:      8000 + 35*c[0] + 10*rng.NormFloat64(),
			com:      500 + 15*c[1] + 5*rng.NormFloat64(),
			perConn:  2.6 + 0.1*c[2] + 0.02*rng.NormFloat64(), // people per residential connection
			growth:   3 + 1.5*rng.Float64(),                   // new residential connections a day
			age:      30 + 8*c[1] + 2*rng.NormFloat64(),
			pressure: 3.5 + 0.15*c[2] + 0.03*rng.NormFloat64(),
		}
	}
	round1 := func(x float64) float64 { return math.Round(x*10) / 10 }
	round3 := func(x float64) float64 { return math.Round(x*1000) / 1000 }
	// The supply sources draw on a stream of their own, so that the
	// other columns are the same with or without them.
	srng := rand.New(rand.NewPCG(s.Seed+1, s.Seed^0x5bd1e9955bd1e995))
	var rows []Row
	rain := 0.0
	for d := 0; d < s.Days; d++ {
		day := s.Start.AddDate(0, 0, d)
		season := math.Sin(2 * math.Pi * (float64(d) + 20) / 365)
		baseTemp := 17 + 9*season + 2.5*rng.NormFloat64()
		// Rain comes in spells: a wet day makes the next one likelier.
		if rng.Float64() < 0.25+0.3*math.Min(rain, 1) {
			rain = rng.ExpFloat64() * 6
		} else {
			rain = 0
		}
		// Smart meters roll out over the period: the share of accounts
		// billed on a real reading rather than an estimate.
		rollout := 0.2 + 0.795/(1+math.Exp(-(float64(d)-float64(s.RolloutDay))/8))
		for i, name := range s.Districts {
			x := &ds[i]
			// Mains renewal now and then lowers the network's mean age.
			x.age += 1.0 / 365
			if rng.Float64() < 0.08 {
				x.age -= 0.05 + 0.25*rng.Float64()
			}
			// Active connections move from day to day as accounts open,
			// close and are disconnected.
			res := math.Round(x.res + x.growth*float64(d) + 40*rng.NormFloat64())
			com := math.Round(x.com + 20*rng.NormFloat64())
			pop := res*x.perConn + 60*rng.NormFloat64()
			total := res + com
			if d < s.ChangeDay {
				// Other connections (standpipes, building sites), no
				// longer counted after the change.
				total += math.Max(0, math.Round(60+45*rng.NormFloat64()))
			}
			temp := round1(baseTemp + 0.8*rng.NormFloat64())
			rainfall := math.Max(0, rain*(0.7+0.6*rng.Float64()))
			if rng.Float64() < 0.2 {
				rainfall += rng.ExpFloat64() * 1.5 // a local shower
			}
			rainfall = round1(rainfall)
			pressure := round3(x.pressure + 0.12*rng.NormFloat64())
			if name == s.StuckDistrict && d >= s.StuckDay {
				pressure = 3.415
			}
			metered := pop*0.145 + 60*(temp-15) - 10*rainfall + 300*rng.NormFloat64()
			estimate := metered*(0.9+0.08*rng.NormFloat64()) + 500*rng.NormFloat64()
			billed := rollout*metered*(1+0.004*rng.NormFloat64()) + (1-rollout)*estimate
			source, chlorine := s.source(srng, i, name, d, temp)
			leak := 18*x.age + 260*(pressure-3.5)
			demand := metered + leak + 150*rng.NormFloat64()
			rows = append(rows, Row{
				Day: day, District: name,
				TemperatureC: temp, RainfallMM: rainfall,
				PopulationServed:       int64(math.Round(pop)),
				ResidentialConnections: int64(res),
				CommercialConnections:  int64(com),
				TotalConnections:       int64(total),
				PipeAgeYears:           round3(x.age),
				PressureBar:            pressure,
				MeteredVolumeM3:        round1(metered),
				BilledVolumeM3:         round1(billed),
				SupplySource:           source,
				ChlorineMgL:            chlorine,
				DemandM3:               round1(demand),
			})
		}
	}
	return rows
}

// source draws district i's supply source on day d and the chlorine dose
// set for it: before DoseDay the works adjust the dose by hand, with the
// temperature and from day to day; from DoseDay on it is the source's own.
// Each district leans on one source (its index) and takes the others on
// some days.
func (s Scenario) source(rng *rand.Rand, i int, name string, d int, temp float64) (string, float64) {
	k := i % len(Sources)
	if u := rng.Float64(); u >= 0.55 {
		k = (k + 1 + int((u-0.55)/0.225)) % len(Sources)
	}
	src, dose := Sources[k].Name, Sources[k].Dose
	if name == s.NewSourceIn && d >= s.NewSourceDay && rng.Float64() < 0.35 {
		src, dose = s.NewSource, newSourceDose
	}
	manual := 0.62 + 0.01*(temp-17) + 0.12*rng.NormFloat64()
	if d < s.DoseDay {
		return src, math.Round(manual*100) / 100
	}
	return src, dose
}

// WriteSQLite creates path (which must not exist) holding the scenario's
// table.
func (s Scenario) WriteSQLite(ctx context.Context, path string) error {
	db, err := sql.Open("sqlite", "file:"+path+"?mode=rwc")
	if err != nil {
		return fmt.Errorf("demo database %s: %w", path, err)
	}
	defer db.Close()
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("demo database %s: %w", path, err)
	}
	defer tx.Rollback()
	if _, err := tx.ExecContext(ctx, `CREATE TABLE `+Table+` (
		day TEXT NOT NULL,
		district TEXT NOT NULL,
		temperature_c REAL,
		rainfall_mm REAL,
		population_served INTEGER,
		residential_connections INTEGER,
		commercial_connections INTEGER,
		total_connections INTEGER,
		pipe_age_years REAL,
		pressure_bar REAL,
		metered_volume_m3 REAL,
		billed_volume_m3 REAL,
		supply_source TEXT NOT NULL,
		chlorine_mg_l REAL,
		demand_m3 REAL,
		PRIMARY KEY (day, district)
	)`); err != nil {
		return fmt.Errorf("demo database %s: %w", path, err)
	}
	stmt, err := tx.PrepareContext(ctx, `INSERT INTO `+Table+` VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)`)
	if err != nil {
		return fmt.Errorf("demo database %s: %w", path, err)
	}
	defer stmt.Close()
	for _, r := range s.Rows() {
		if _, err := stmt.ExecContext(ctx, r.Day.Format(time.DateOnly), r.District,
			r.TemperatureC, r.RainfallMM, r.PopulationServed,
			r.ResidentialConnections, r.CommercialConnections, r.TotalConnections,
			r.PipeAgeYears, r.PressureBar, r.MeteredVolumeM3, r.BilledVolumeM3, r.SupplySource, r.ChlorineMgL, r.DemandM3); err != nil {
			return fmt.Errorf("demo database %s: %w", path, err)
		}
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("demo database %s: %w", path, err)
	}
	return nil
}
