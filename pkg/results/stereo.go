package results

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/mottledic/mottle/pkg/correlate"
	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/stereo"
)

// StereoInput is what the stereo field builder needs: the reference shape,
// and optionally one deformed state with its surface strain.
type StereoInput struct {
	Ref *stereo.Reference
	// State and Surface may be nil: the field then holds the shape only.
	State   *stereo.State
	Surface []stereo.Surface
	// Frame is the frame of positions and displacements (see
	// stereo.SpecimenFrame).
	Frame stereo.Frame
	// StrainWindow is the window Surface was computed with, grid points.
	StrainWindow int
}

// BuildStereo turns a stereo measurement into a result field on the left
// reference image's grid. Quantities (lengths in mm, in Frame): x_mm,
// y_mm, z_mm the reference position (the shape), std_z_mm its std along z;
// with a state: u, v, w the 3D displacement and std_u, std_v, std_w, u_px
// and v_px the left image displacement (for maps over the images),
// E11, E22, E12 (Green–Lagrange) and their std std_E11, std_E22, std_E12
// (stereo.Strain), H11, H22, H12 (Hencky), E_max, E_min,
// E_max_angle_deg, von_mises, rotation_deg in the local tangent plane
// (axis 1 along the left image's x projected on the surface),
// w_normal the displacement along the local surface normal,
// normal_rotation_deg; zncc, gap_px (optimal correction of the pair) and
// valid. field.WriteVTS draws the points at (x_mm, y_mm, z_mm), so the
// surface is shown in place. The status is the stereo status, with the 2D
// reason after a colon (e.g. "right_track:diverged").
func BuildStereo(in StereoInput, params any, software string) (*field.Field, error) {
	r := in.Ref
	if r == nil {
		return nil, errors.New("stereo field: no reference")
	}
	if in.State != nil && len(in.State.Points) != len(r.Points) {
		return nil, fmt.Errorf("stereo field: the state has %d points, the reference %d", len(in.State.Points), len(r.Points))
	}
	if in.Surface != nil && len(in.Surface) != len(r.Points) {
		return nil, fmt.Errorf("stereo field: %d surface points for %d points", len(in.Surface), len(r.Points))
	}
	g := r.Grid
	f := field.New(g.Nx, g.Ny, g.X0, g.Y0, g.Step, r.Options.Correlate.Subset)
	n := g.Len()
	nan := func() []float64 {
		v := make([]float64, n)
		for k := range v {
			v[k] = math.NaN()
		}
		return v
	}
	q := map[string][]float64{}
	units := map[string]string{}
	add := func(name, unit string) []float64 {
		v := nan()
		q[name], units[name] = v, unit
		return v
	}
	xs, ys, zs, sz := add("x_mm", "mm"), add("y_mm", "mm"), add("z_mm", "mm"), add("std_z_mm", "mm")
	zn, gap, valid := add("zncc", "1"), add("gap_px", "px"), add("valid", "1")
	for k, p := range r.Points {
		f.Status[k] = status(p.Status, p.Match)
		valid[k] = 0
		if p.Status != stereo.OK {
			continue
		}
		P := in.Frame.Apply(p.Pos)
		xs[k], ys[k], zs[k] = P[0], P[1], P[2]
		// Std along the frame's z (root sum of squares of the rotated
		// per-axis std; conservative).
		var s2 float64
		for b := range 3 {
			s2 += in.Frame.R[2][b] * in.Frame.R[2][b] * p.Std[b] * p.Std[b]
		}
		sz[k] = math.Sqrt(s2)
		zn[k], gap[k] = p.ZNCC, p.Gap
		valid[k] = 1
	}
	if st := in.State; st != nil {
		u, v, w := add("u", "mm"), add("v", "mm"), add("w", "mm")
		su, sv, sw := add("std_u", "mm"), add("std_v", "mm"), add("std_w", "mm")
		upx, vpx := add("u_px", "px"), add("v_px", "px")
		for k, p := range st.Points {
			f.Status[k] = status(p.Status, p.Match)
			if p.Status != stereo.OK {
				valid[k] = 0
				zn[k], gap[k] = math.NaN(), math.NaN()
				continue
			}
			d := in.Frame.Vector(p.Disp)
			u[k], v[k], w[k] = d[0], d[1], d[2]
			// Per-axis std carried to the frame axes (root sum of squares
			// of the rotated components; conservative).
			for a, out := range [][]float64{su, sv, sw} {
				var s2 float64
				for b := range 3 {
					s2 += in.Frame.R[a][b] * in.Frame.R[a][b] * p.Std[b] * p.Std[b]
				}
				out[k] = math.Sqrt(s2)
			}
			upx[k], vpx[k] = p.XL-r.Points[k].X, p.YL-r.Points[k].Y
			zn[k], gap[k] = math.Min(zn[k], p.ZNCC), math.Max(gap[k], p.Gap)
		}
	}
	if sf := in.Surface; sf != nil {
		names := []string{"E11", "E22", "E12", "std_E11", "std_E22", "std_E12", "H11", "H22", "H12", "E_max", "E_min", "E_max_angle_deg", "von_mises", "rotation_deg", "w_normal", "normal_rotation_deg"}
		unit := map[string]string{"E_max_angle_deg": "deg", "rotation_deg": "deg", "normal_rotation_deg": "deg", "w_normal": "mm"}
		cols := map[string][]float64{}
		for _, nm := range names {
			u := unit[nm]
			if u == "" {
				u = "1"
			}
			cols[nm] = add(nm, u)
		}
		for k, s := range sf {
			if !s.OK {
				if f.Status[k] == "ok" {
					f.Status[k] = "too_few_neighbours"
				}
				continue
			}
			m := s.M
			vals := map[string]float64{"E11": m.E[0][0], "E22": m.E[1][1], "E12": m.E[0][1],
				"std_E11": s.StdE[0], "std_E22": s.StdE[1], "std_E12": s.StdE[2],
				"H11": m.H[0][0], "H22": m.H[1][1], "H12": m.H[0][1], "E_max": m.EMax, "E_min": m.EMin,
				"E_max_angle_deg": m.EMaxAngleDeg, "von_mises": m.VonMises, "rotation_deg": m.RotationDeg,
				"w_normal": s.W, "normal_rotation_deg": s.NormalRotationDeg}
			for nm, x := range vals {
				cols[nm][k] = x
			}
		}
	}
	for nm, v := range q {
		if err := f.Set(nm, units[nm], v); err != nil {
			return nil, err
		}
	}
	if params != nil {
		b, err := json.Marshal(params)
		if err != nil {
			return nil, fmt.Errorf("stereo field: params: %w", err)
		}
		f.Params = b
	}
	f.Meta.Software = software
	f.Meta.Created = time.Now().UTC()
	f.Meta.ImageWidth, f.Meta.ImageHeight = r.Triangulator().Rig().W, r.Triangulator().Rig().H
	f.Meta.StrainWindow = in.StrainWindow
	f.Meta.PrincipalOf = "green_lagrange"
	f.Meta.Cautions = append(field.Cautions(),
		"Stereo results depend on the rig calibration: its uncertainty adds to every position and strain; recalibrate after moving either camera.")
	fr := in.Frame
	f.Meta.Extra = map[string]any{
		"measurement":     "stereo",
		"frame":           "specimen plane: origin at the centroid of the reference shape, z along its least-squares normal toward the cameras, x along the left image x",
		"frame_origin_mm": fr.Origin, "frame_rotation": fr.R,
		"rig_baseline_mm": r.Triangulator().Rig().Baseline(), "rig_angle_deg": r.Triangulator().Rig().Angle(),
	}
	return f, f.Validate()
}

func status(s stereo.Status, m correlate.Status) string {
	if s == stereo.OK || m == correlate.OK {
		return s.String()
	}
	return s.String() + ":" + m.String()
}
