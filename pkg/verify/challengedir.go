package verify

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"

	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/synth"
)

// ChallengeEnv names the environment variable that points at a folder of
// real DIC Challenge 2.0 star images (see LoadChallengeDir).
const ChallengeEnv = "MOTTLE_CHALLENGE_DIR"

// ChallengeManifest is the file challenge.json that describes a folder of
// star images for LoadChallengeDir. File names are relative to the folder.
// The star parameters follow synth.Star: v = A·cos(2π(y − Y0)/p(x)) with
// p from PeriodMin at x ≤ X0 to PeriodMax at x ≥ X1, linear in x unless
// Geometric. Enter the values published with the images.
type ChallengeManifest struct {
	Static    [2]string `json:"static"`    // two images of the undeformed state
	Reference string    `json:"reference"` // reference image of the star pair
	Deformed  string    `json:"deformed"`  // star-deformed image
	Amplitude float64   `json:"amplitude_px"`
	Y0        float64   `json:"y0"`
	PeriodMin float64   `json:"period_min_px"`
	PeriodMax float64   `json:"period_max_px"`
	X0        float64   `json:"x0"`
	X1        float64   `json:"x1"`
	Geometric bool      `json:"geometric"`
	Sign      float64   `json:"sign"`        // +1 (crest on Y0, default) or −1 (trough)
	Noise     float64   `json:"noise_sigma"` // image noise σ if known, grey levels; 0 = unknown
}

// LoadChallengeDir reads dir/challenge.json and the images it names and
// returns the star set and the image noise σ it states (0 if unknown).
// Example challenge.json:
//
//	{"static": ["static_0.tif", "static_1.tif"],
//	 "reference": "star_ref.tif", "deformed": "star_def.tif",
//	 "amplitude_px": 0.5, "y0": 250, "period_min_px": 10, "period_max_px": 300,
//	 "x0": 0, "x1": 3999}
func LoadChallengeDir(dir string) (StarSet, float64, error) {
	mp := filepath.Join(dir, "challenge.json")
	b, err := os.ReadFile(mp)
	if err != nil {
		return StarSet{}, 0, fmt.Errorf("challenge folder %s: %w; it needs a challenge.json naming the static pair, the star pair and the star parameters (see verify.ChallengeManifest)", dir, err)
	}
	var m ChallengeManifest
	if err := json.Unmarshal(b, &m); err != nil {
		return StarSet{}, 0, fmt.Errorf("challenge manifest %s: %w", mp, err)
	}
	star := synth.Star{Amplitude: m.Amplitude, PeriodMin: m.PeriodMin, PeriodMax: m.PeriodMax,
		X0: m.X0, X1: m.X1, Y0: m.Y0, Geometric: m.Geometric}
	var errs []error
	if err := star.Validate(); err != nil {
		errs = append(errs, err)
	}
	if !(m.Amplitude > 0) {
		errs = append(errs, fmt.Errorf("amplitude_px %v: must be positive", m.Amplitude))
	}
	if m.Y0 != float64(int(m.Y0)) {
		errs = append(errs, fmt.Errorf("y0 %v: must be a whole pixel row", m.Y0))
	}
	if m.Sign != 0 && m.Sign != 1 && m.Sign != -1 {
		errs = append(errs, fmt.Errorf("sign %v: must be 1 or -1", m.Sign))
	}
	names := []string{m.Static[0], m.Static[1], m.Reference, m.Deformed}
	fields := []string{"static[0]", "static[1]", "reference", "deformed"}
	imgs := make([]*imageio.Gray, 4)
	for i, n := range names {
		if n == "" {
			errs = append(errs, fmt.Errorf("%s: file name missing", fields[i]))
			continue
		}
		g, err := imageio.ReadFile(filepath.Join(dir, n), imageio.DefaultLimits())
		if err != nil {
			errs = append(errs, fmt.Errorf("%s: %w", fields[i], err))
			continue
		}
		imgs[i] = g
	}
	if err := errors.Join(errs...); err != nil {
		return StarSet{}, 0, fmt.Errorf("challenge manifest %s: %w", mp, err)
	}
	return StarSet{
		StaticRef: imgs[0], StaticDef: imgs[1], Ref: imgs[2], Def: imgs[3],
		Amplitude: m.Amplitude, Y0: int(m.Y0), Sign: m.Sign,
		Period: func(x float64) float64 { p, _ := star.Period(x); return p },
	}, m.Noise, nil
}
