package diagnostics

import (
	"fmt"
	"math"
	"reflect"
	"strings"
)

// regressionOwnUnits converts the regression, fitted on the design's scaled
// columns (x_j/s_j, y/s_y), to the columns' own units: b_j·s_y/s_j, b₀·s_y,
// σ·s_y and so on (exact: the scales are powers of two). t statistics, R²,
// VIFs, severities and expected digits do not depend on the units.
func (rep *Report) regressionOwnUnits(d *design) {
	reg := rep.Regression
	if reg == nil {
		return
	}
	sy := d.scale[d.k]
	byName := make(map[string]float64, d.k)
	for j := 0; j < d.k; j++ {
		byName[d.names[j]] = d.scale[j]
	}
	for i := range reg.Coefficients {
		c := &reg.Coefficients[i]
		r := sy // the intercept, first when there is one
		if i > 0 || !reg.Intercept {
			r = sy / byName[c.Name]
		}
		c.Estimate *= r
		c.StdError *= r
	}
	reg.Sigma *= sy
	reg.Sigma2 *= sy * sy
	for i := range reg.Attribution {
		a := &reg.Attribution[i]
		sj := byName[a.Name]
		a.Sigma2 *= sy * sy
		a.SST *= sj * sj
		a.Variance *= (sy / sj) * (sy / sj)
	}
}

// finite keeps NaN and ±Inf out of the report, whose JSON form cannot hold
// them: a float field that is not finite becomes ±MaxFloat64 (an overflow,
// such as σ² of data near 1e200) or 0 (NaN), an optional one becomes null,
// and a note names each. With every column scaled before its products are
// formed this does not happen for data between about 1e-300 and 1e300.
func (rep *Report) finite() {
	var bad []string
	var walk func(v reflect.Value, path string)
	walk = func(v reflect.Value, path string) {
		switch v.Kind() {
		case reflect.Float64:
			if x := v.Float(); math.IsNaN(x) || math.IsInf(x, 0) {
				bad = append(bad, fmt.Sprintf("%s (%v)", path, x))
				switch {
				case math.IsInf(x, 1):
					v.SetFloat(math.MaxFloat64)
				case math.IsInf(x, -1):
					v.SetFloat(-math.MaxFloat64)
				default:
					v.SetFloat(0)
				}
			}
		case reflect.Pointer:
			if v.IsNil() {
				return
			}
			if e := v.Elem(); e.Kind() == reflect.Float64 {
				if x := e.Float(); math.IsNaN(x) || math.IsInf(x, 0) {
					bad = append(bad, fmt.Sprintf("%s (%v)", path, x))
					v.SetZero()
				}
				return
			}
			walk(v.Elem(), path)
		case reflect.Struct:
			t := v.Type()
			for i := 0; i < v.NumField(); i++ {
				if !t.Field(i).IsExported() {
					continue
				}
				walk(v.Field(i), path+"."+jsonName(t.Field(i)))
			}
		case reflect.Slice, reflect.Array:
			for i := 0; i < v.Len(); i++ {
				walk(v.Index(i), fmt.Sprintf("%s[%d]", path, i))
			}
		case reflect.Map:
			if v.Type().Elem().Kind() != reflect.Float64 {
				return
			}
			iter := v.MapRange()
			var fix []reflect.Value
			for iter.Next() {
				if x := iter.Value().Float(); math.IsNaN(x) || math.IsInf(x, 0) {
					bad = append(bad, fmt.Sprintf("%s[%v] (%v)", path, iter.Key(), x))
					fix = append(fix, iter.Key())
				}
			}
			for _, k := range fix {
				x := v.MapIndex(k).Float()
				y := 0.0
				if math.IsInf(x, 0) {
					y = math.Copysign(math.MaxFloat64, x)
				}
				v.SetMapIndex(k, reflect.ValueOf(y))
			}
		}
	}
	walk(reflect.ValueOf(rep).Elem(), "report")
	if len(bad) > 0 {
		rep.Notes = append(rep.Notes, "values outside the range of float64 were replaced (overflow by ±1.8e308, undefined by 0 or null): "+strings.Join(bad, ", "))
	}
}

// jsonName is a field's name in the report's JSON form.
func jsonName(f reflect.StructField) string {
	if tag, _, _ := strings.Cut(f.Tag.Get("json"), ","); tag != "" && tag != "-" {
		return tag
	}
	return f.Name
}
