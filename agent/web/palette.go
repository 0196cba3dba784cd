package web

// The dashboard's colours.
//
// Lines, bars and states use the eight colours of Okabe & Ito, "Color
// Universal Design (CUD): how to make figures and presentations that are
// friendly to colorblind people" (2008), chosen to stay apart for the
// common forms of colour-vision deficiency. The pairs used side by side
// also differ in lightness (blue and vermillion are dark, orange and sky
// blue light), and every level or category carries a second cue that
// survives grey printing: a dash pattern for levels, a hatch pattern for
// bar categories, a shape and a word for states.
//
// The correlation heat map uses Paul Tol's diverging scheme "BuRd" (Tol,
// "Colour Schemes", SRON technical note SRON/EPS/TN/09-002, 2021), which
// is colour-blind safe and runs from dark blue (−1) through near white (0)
// to dark red (+1); as its two ends print as the same grey, every cell also
// carries its value as text. The hex values below are those published,
// recalled from memory.
const (
	colBlack      = "#000000"
	colOrange     = "#E69F00"
	colSkyBlue    = "#56B4E9"
	colGreen      = "#009E73"
	colYellow     = "#F0E442"
	colBlue       = "#0072B2"
	colVermillion = "#D55E00"
	colPurple     = "#CC79A7"
	colGrey       = "#6B6B6B"
	colGrid       = "#E3E3E3"
	colAxis       = "#4D4D4D"
)

// Dash patterns (SVG stroke-dasharray) for the levels.
const (
	dashWarn     = "7 4"
	dashCritical = "12 3 2 3"
	dashForecast = "2 3"
)

// tolBuRd is Tol's diverging BuRd, nine colours from −1 to +1.
var tolBuRd = [9]string{
	"#2166AC", "#4393C3", "#92C5DE", "#D1E5F0", "#F7F7F7",
	"#FDDBC7", "#F4A582", "#D6604D", "#B2182B",
}

// stateColour and stateShape give a state's colour and its grey-safe
// symbol.
func stateColour(s State) string {
	switch s {
	case StateOK:
		return colGreen
	case StateWarning:
		return colOrange
	case StateCritical:
		return colVermillion
	}
	return colGrey
}
