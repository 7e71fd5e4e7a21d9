package main

import (
	"strings"
	"testing"
)

// TestParseGauges: the one --gauge parser of series and stereo series
// reads rectangles and polygons and names each malformed value.
func TestParseGauges(t *testing.T) {
	gs, errs := parseGauges([]string{"mid:10,20,110,70", "tri:poly:0,0,50,0,25,40", "bad", "odd:poly:1,2,3", "short:1,2,3"})
	if len(gs) != 2 || gs[0].Name != "mid" || gs[0].Rect == nil || *gs[0].Rect != [4]float64{10, 20, 110, 70} ||
		gs[1].Name != "tri" || len(gs[1].Polygon) != 3 || gs[1].Polygon[2] != [2]float64{25, 40} {
		t.Fatalf("gauges %+v", gs)
	}
	if len(errs) != 3 {
		t.Fatalf("errors %v, want 3", errs)
	}
	for i, want := range []string{`"bad"`, `"odd:poly:1,2,3": polygon needs pairs`, "short"} {
		if !strings.Contains(errs[i].Error(), want) {
			t.Errorf("error %q lacks %q", errs[i], want)
		}
	}
}
