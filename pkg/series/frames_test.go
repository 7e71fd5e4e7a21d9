package series

import (
	"strings"
	"testing"
)

// FrameMetas assembles names, time stamps and loads as the CLI gives them.
func TestFrameMetas(t *testing.T) {
	names := []string{"run/reference.png", "run/frame_t0.5s.png", "run/frame_t1.5s.png"}
	m, err := FrameMetas(names, TimeSource{FPS: 2}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if m[0].Name != "reference.png" || *m[1].Time != 0.5 || *m[2].Time != 1 || m[2].Load != nil {
		t.Errorf("fps metas %+v", m)
	}
	tbl, err := ReadTable(strings.NewReader("frame,load_N\n0,0\n1,150\n2,300\n"), "loads.csv")
	if err != nil {
		t.Fatal(err)
	}
	m, err = FrameMetas(names[1:], TimeSource{Pattern: `_t([0-9.]+)s`}, tbl)
	if err != nil {
		t.Fatal(err)
	}
	if *m[0].Time != 0.5 || *m[1].Time != 1.5 || *m[0].Load != 0 || *m[1].Load != 150 {
		t.Errorf("pattern and table metas %+v", m)
	}
	if _, err := FrameMetas([]string{"b_t2s.png", "a_t1s.png"}, TimeSource{Pattern: `_t([0-9.]+)s`}, nil); err == nil {
		t.Error("decreasing time stamps: want an error")
	}
}
