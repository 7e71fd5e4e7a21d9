package series

import (
	"encoding/json"
	"math"
	"strconv"
)

// The state of a series holds some 25 numbers per grid point (the point
// states and three frames of history), so its encoding and decoding were
// most of the time a service worker spends adding a frame solved ahead
// (issue 21). The float lists encode here by hand, in the very bytes
// encoding/json writes for a []*float64 (NaN and ±Inf as null), and
// decode with strconv, falling back to encoding/json for anything but a
// plain list of numbers and nulls, so what is accepted does not change.

// appendFloats appends f as a JSON list, NaN and ±Inf as null.
func appendFloats(b []byte, f []float64) []byte {
	b = append(b, '[')
	for i, v := range f {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendFloat(b, v)
	}
	return append(b, ']')
}

// appendFloat appends v as encoding/json writes a float64 (the rule of
// its floatEncoder: 'f' format, or 'e' below 1e-6 and from 1e21 on, with
// a two-digit negative exponent written with one digit), null when v is
// not finite.
func appendFloat(b []byte, v float64) []byte {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return append(b, "null"...)
	}
	fm := byte('f')
	if a := math.Abs(v); a != 0 && (a < 1e-6 || a >= 1e21) {
		fm = 'e'
	}
	b = strconv.AppendFloat(b, v, fm, -1, 64)
	if fm == 'e' {
		// clean up e-09 to e-9
		if n := len(b); n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return b
}

// parseFloats reads a JSON list of numbers and nulls (null as NaN) into
// dst[:0]. ok is false when b is anything else (then nothing is decided:
// the caller decodes b with encoding/json).
func parseFloats(b []byte, dst []float64) (out []float64, ok bool, err error) {
	i := skipSpace(b, 0)
	if i >= len(b) || b[i] != '[' {
		return nil, false, nil
	}
	out = dst[:0]
	i = skipSpace(b, i+1)
	if i < len(b) && b[i] == ']' {
		return out, skipSpace(b, i+1) == len(b), nil
	}
	for {
		j := i
		for j < len(b) && plainNumber(b[j]) {
			j++
		}
		switch {
		case j > i && !jsonNumber(b[i:j]):
			return nil, false, nil
		case j > i:
			v, err := strconv.ParseFloat(string(b[i:j]), 64)
			if err != nil {
				return nil, true, err
			}
			out = append(out, v)
		case len(b)-i >= 4 && string(b[i:i+4]) == "null":
			out = append(out, math.NaN())
			j = i + 4
		default:
			return nil, false, nil
		}
		i = skipSpace(b, j)
		if i >= len(b) {
			return nil, false, nil
		}
		switch b[i] {
		case ',':
			i = skipSpace(b, i+1)
		case ']':
			return out, skipSpace(b, i+1) == len(b), nil
		default:
			return nil, false, nil
		}
	}
}

// jsonNumber reports whether b is a number by the grammar of RFC 8259,
// section 6: -? (0 | [1-9][0-9]*) (. [0-9]+)? ([eE] [+-]? [0-9]+)?.
// strconv.ParseFloat also takes "+1", ".5", "1." and "01", which JSON
// does not.
func jsonNumber(b []byte) bool {
	i := 0
	if i < len(b) && b[i] == '-' {
		i++
	}
	digits := func() int {
		n := 0
		for i < len(b) && b[i] >= '0' && b[i] <= '9' {
			i++
			n++
		}
		return n
	}
	switch {
	case i < len(b) && b[i] == '0':
		i++
	case digits() == 0:
		return false
	}
	if i < len(b) && b[i] == '.' {
		i++
		if digits() == 0 {
			return false
		}
	}
	if i < len(b) && (b[i] == 'e' || b[i] == 'E') {
		i++
		if i < len(b) && (b[i] == '+' || b[i] == '-') {
			i++
		}
		if digits() == 0 {
			return false
		}
	}
	return i == len(b)
}

// plainNumber reports whether c may be part of a JSON number.
func plainNumber(c byte) bool {
	return c >= '0' && c <= '9' || c == '-' || c == '+' || c == '.' || c == 'e' || c == 'E'
}

func skipSpace(b []byte, i int) int {
	for i < len(b) && (b[i] == ' ' || b[i] == '\t' || b[i] == '\n' || b[i] == '\r') {
		i++
	}
	return i
}

// decodeFloats decodes a JSON list of numbers and nulls (null as NaN),
// by parseFloats or, for anything it does not read, encoding/json.
func decodeFloats(b []byte, dst []float64) ([]float64, error) {
	if out, ok, err := parseFloats(b, dst); ok {
		return out, err
	}
	var p []*float64
	if err := json.Unmarshal(b, &p); err != nil {
		return nil, err
	}
	out := dst[:0]
	for _, v := range p {
		if v == nil {
			out = append(out, math.NaN())
		} else {
			out = append(out, *v)
		}
	}
	return out, nil
}
