package series

import (
	"strings"
	"testing"

	"github.com/mottledic/mottle/pkg/series/props"
)

// TestUniformElongationLine checks how the report states A_g = A_gt − R_m/E
// (ISO 6892-1): a small negative value of a curve that stayed elastic is
// reported as zero with the computed value beside it, and without a modulus
// A_g is said to be not computed rather than shown as 0 %.
func TestUniformElongationLine(t *testing.T) {
	cases := []struct {
		name string
		p    Properties
		want string
	}{
		{"plastic", Properties{Modulus: &props.Modulus{E: 70000}, Ultimate: &props.Ultimate{Stress: 300, StrainAtMax: 0.05, PlasticStrainAtMax: 0.0457}}, "Ag = 4.57 %"},
		{"elastic, noise below zero", Properties{Modulus: &props.Modulus{E: 70000}, Ultimate: &props.Ultimate{Stress: 70, StrainAtMax: 0.000983, PlasticStrainAtMax: -1.65e-5}}, "Ag = 0 % (computed -0.0017 %"},
		{"no modulus", Properties{Ultimate: &props.Ultimate{Stress: 300, StrainAtMax: 0.05}}, "Ag not computed"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var line string
			for _, l := range c.p.Lines() {
				if strings.HasPrefix(l[0], "Ultimate strength") {
					line = l[1]
				}
			}
			if !strings.Contains(line, c.want) {
				t.Errorf("line %q does not contain %q", line, c.want)
			}
		})
	}
}
