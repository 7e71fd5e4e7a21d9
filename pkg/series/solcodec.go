package series

import (
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"math"
)

// The binary form of a Solution, the blob a frame solved ahead leaves for
// its turn (and for the frames solved after it, as their guess). It keeps
// every value bit for bit, NaN included, and each point's Reason, which
// the JSON form leaves out: a frame added from its solution then reports
// the same status for an invalid point as a frame added in sequence. All
// numbers are little-endian:
//
//	"MSOL" version(1 byte, 1)
//	X0 Y0 Step (float64) Nx Ny (uint32)
//	then per point, row-major on the grid:
//	X Y F11 F12 F21 F22 ZNCC StdU StdV (float64), valid (1 byte),
//	len(Reason) (uvarint), Reason
const (
	solMagic   = "MSOL"
	solVersion = 1
	solPoint   = 9*8 + 1 // the fixed part of a point
)

// MarshalBinary encodes s in the binary form above.
func (s *Solution) MarshalBinary() ([]byte, error) {
	if s.Grid.Nx < 0 || s.Grid.Ny < 0 || s.Grid.Nx > math.MaxUint32 || s.Grid.Ny > math.MaxUint32 {
		return nil, fmt.Errorf("solution: grid %d×%d cannot be encoded", s.Grid.Nx, s.Grid.Ny)
	}
	b := make([]byte, 0, len(solMagic)+1+3*8+2*4+len(s.Points)*(solPoint+1))
	b = append(b, solMagic...)
	b = append(b, solVersion)
	for _, v := range []float64{s.Grid.X0, s.Grid.Y0, s.Grid.Step} {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
	}
	b = binary.LittleEndian.AppendUint32(b, uint32(s.Grid.Nx))
	b = binary.LittleEndian.AppendUint32(b, uint32(s.Grid.Ny))
	for _, q := range s.Points {
		for _, v := range [9]float64{q.X, q.Y, q.F[0], q.F[1], q.F[2], q.F[3], q.ZNCC, q.StdU, q.StdV} {
			b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v))
		}
		v := byte(0)
		if q.Valid {
			v = 1
		}
		b = append(b, v)
		b = binary.AppendUvarint(b, uint64(len(q.Reason)))
		b = append(b, q.Reason...)
	}
	return b, nil
}

// errNotBinary reports data that does not start as the binary form.
var errNotBinary = errors.New("solution: not the binary form")

// UnmarshalBinary decodes the binary form above: the grid, then exactly
// Nx·Ny points and nothing after them.
func (s *Solution) UnmarshalBinary(b []byte) error {
	if len(b) < len(solMagic)+1 || string(b[:len(solMagic)]) != solMagic {
		return errNotBinary
	}
	if v := b[len(solMagic)]; v != solVersion {
		return fmt.Errorf("solution: binary form version %d, want %d", v, solVersion)
	}
	b = b[len(solMagic)+1:]
	if len(b) < 3*8+2*4 {
		return errors.New("solution: grid truncated")
	}
	f64 := func() float64 {
		v := math.Float64frombits(binary.LittleEndian.Uint64(b))
		b = b[8:]
		return v
	}
	var g lattice
	g.X0, g.Y0, g.Step = f64(), f64(), f64()
	nx, ny := binary.LittleEndian.Uint32(b), binary.LittleEndian.Uint32(b[4:])
	b = b[8:]
	n := uint64(nx) * uint64(ny)
	if n > uint64(len(b)/(solPoint+1)) {
		return fmt.Errorf("solution: grid %d×%d needs more than the %d bytes left", nx, ny, len(b))
	}
	g.Nx, g.Ny = int(nx), int(ny)
	pts := make([]PointState, n)
	var tmp [binary.MaxVarintLen64]byte
	for k := range pts {
		if len(b) < solPoint+1 {
			return fmt.Errorf("solution: point %d of %d truncated", k, n)
		}
		q := &pts[k]
		q.X, q.Y = f64(), f64()
		q.F = [4]float64{f64(), f64(), f64(), f64()}
		q.ZNCC, q.StdU, q.StdV = f64(), f64(), f64()
		switch b[0] {
		case 0:
		case 1:
			q.Valid = true
		default:
			return fmt.Errorf("solution: point %d has valid flag %d, want 0 or 1", k, b[0])
		}
		b = b[1:]
		l, m := binary.Uvarint(b)
		if m <= 0 || l > uint64(len(b)-m) {
			return fmt.Errorf("solution: point %d reason truncated", k)
		}
		if m != binary.PutUvarint(tmp[:], l) {
			return fmt.Errorf("solution: point %d reason length not in its shortest form", k)
		}
		q.Reason = string(b[m : m+int(l)])
		b = b[m+int(l):]
	}
	if len(b) != 0 {
		return fmt.Errorf("solution: %d bytes after the last point", len(b))
	}
	*s = Solution{Grid: g, Points: pts}
	return nil
}

// DecodeSolution reads a solution in the binary form (MarshalBinary) or,
// as written by earlier versions, as JSON.
func DecodeSolution(b []byte) (*Solution, error) {
	s := new(Solution)
	err := s.UnmarshalBinary(b)
	if errors.Is(err, errNotBinary) {
		err = json.Unmarshal(b, s)
	}
	if err != nil {
		return nil, fmt.Errorf("frame solution: %w", err)
	}
	return s, nil
}
