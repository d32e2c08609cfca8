package report

import (
	"math"
	"strconv"
	"strings"
)

// notAvailable is shown for a number that does not exist (null in the
// result).
const notAvailable = "n/a"

// fixed formats v with dec decimals; "-0.00" becomes "0.00".
func fixed(v float64, dec int) string {
	if math.IsNaN(v) {
		return notAvailable
	}
	s := strconv.FormatFloat(v, 'f', dec, 64)
	if strings.HasPrefix(s, "-") && strings.Trim(s[1:], "0.") == "" {
		s = s[1:]
	}
	return s
}

// fixedPtr formats a nullable number with dec decimals, "n/a" for nil.
func fixedPtr(p *float64, dec int) string {
	if p == nil {
		return notAvailable
	}
	return fixed(*p, dec)
}

// signedPtr formats a nullable difference with an explicit sign.
func signedPtr(p *float64, dec int) string {
	if p == nil {
		return notAvailable
	}
	s := fixed(*p, dec)
	if s != notAvailable && !strings.HasPrefix(s, "-") && strings.Trim(s, "0.") != "" {
		s = "+" + s
	}
	return s
}

// ccDecimals is the number of decimals a volume in cc is shown with: three
// below 1 cc (a small metastasis), two below 100 cc, one above.
func ccDecimals(v float64) int {
	switch a := math.Abs(v); {
	case a < 1:
		return 3
	case a < 100:
		return 2
	default:
		return 1
	}
}

// cc formats a volume in cc.
func cc(v float64) string { return fixed(v, ccDecimals(v)) }

// exact formats v in the shortest form that reads back to the same value.
func exact(v float64) string {
	if math.IsNaN(v) {
		return notAvailable
	}
	return strconv.FormatFloat(v, 'f', -1, 64)
}

// ruleValue formats a rule's measured value so that its relation to the
// limit (below, equal, above) reads the same as the exact value's: 94.996
// against a limit of 95 is shown as "94.996", never rounded up to "95.00".
func ruleValue(v, limit float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return exact(v)
	}
	want := compare(v, limit)
	for dec := 2; dec <= 12; dec++ {
		s := fixed(v, dec)
		shown, err := strconv.ParseFloat(s, 64)
		if err == nil && compare(shown, limit) == want {
			return s
		}
	}
	return exact(v)
}

func compare(a, b float64) int {
	switch {
	case a < b:
		return -1
	case a > b:
		return 1
	}
	return 0
}

// mm3 formats a patient position in mm.
func mm3(p [3]float64) string {
	return "(" + fixed(p[0], 1) + ", " + fixed(p[1], 1) + ", " + fixed(p[2], 1) + ")"
}
