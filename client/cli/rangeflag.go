package cli

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/gliss-lab/gliss/sim/model"
)

// MaxRangeN is the largest N that ParseRange accepts (and the most values
// ParseList accepts).
const MaxRangeN = 100000

// ParseRange parses FROM:TO:N, N values from FROM to TO inclusive (both
// finite, 1 ≤ N ≤ 100000). A single finite number X is X:X:1. The error
// says what is wrong and what is allowed; callers prefix the flag name.
func ParseRange(s string) (from, to float64, n int, err error) {
	t := strings.TrimSpace(s)
	parts := strings.Split(t, ":")
	switch len(parts) {
	case 1:
		v, err := parseFinite(parts[0])
		if err != nil {
			return 0, 0, 0, fmt.Errorf("%v: allowed FROM:TO:N (N from 1 to %d) or one finite number", err, MaxRangeN)
		}
		return v, v, 1, nil
	case 3:
	default:
		return 0, 0, 0, fmt.Errorf("%q is not a range: allowed FROM:TO:N (3 fields separated by ':', N from 1 to %d) or one finite number", s, MaxRangeN)
	}
	if from, err = parseFinite(parts[0]); err != nil {
		return 0, 0, 0, fmt.Errorf("FROM %v: allowed a finite number (in FROM:TO:N)", err)
	}
	if to, err = parseFinite(parts[1]); err != nil {
		return 0, 0, 0, fmt.Errorf("TO %v: allowed a finite number (in FROM:TO:N)", err)
	}
	ns := strings.TrimSpace(parts[2])
	n64, perr := strconv.ParseInt(ns, 10, 64)
	if perr != nil {
		return 0, 0, 0, fmt.Errorf("N = %q is not a whole number: allowed 1 to %d (in FROM:TO:N)", ns, MaxRangeN)
	}
	if n64 < 1 || n64 > MaxRangeN {
		return 0, 0, 0, fmt.Errorf("N = %d is out of range: allowed 1 to %d (in FROM:TO:N)", n64, MaxRangeN)
	}
	return from, to, int(n64), nil
}

// RangeValues is the list of N evenly spaced values of a parsed range, FROM
// first and TO last exactly (N = 1 gives FROM).
func RangeValues(from, to float64, n int) []float64 {
	return model.Linspace(from, to, n)
}

// ParseList parses comma-separated finite numbers (at most 100000).
func ParseList(s string) ([]float64, error) {
	parts := strings.Split(strings.TrimSpace(s), ",")
	if len(parts) > MaxRangeN {
		return nil, fmt.Errorf("%d values: allowed at most %d", len(parts), MaxRangeN)
	}
	out := make([]float64, 0, len(parts))
	for i, p := range parts {
		v, err := parseFinite(p)
		if err != nil {
			return nil, fmt.Errorf("value %d: %v: allowed finite numbers separated by commas", i+1, err)
		}
		out = append(out, v)
	}
	return out, nil
}

func parseFinite(s string) (float64, error) {
	s = strings.TrimSpace(s)
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		if ne, ok := err.(*strconv.NumError); ok && ne.Err == strconv.ErrRange {
			return 0, fmt.Errorf("%q is out of range (|x| < 1.8e308)", s)
		}
		return 0, fmt.Errorf("%q is not a number", s)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%q is not finite", s)
	}
	return v, nil
}
