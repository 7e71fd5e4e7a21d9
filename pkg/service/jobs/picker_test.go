package jobs

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"
	"time"
)

// TestPicker checks the Picker against the plain way of listing (keep
// every match, sort them all, cut at Limit from the chosen end) on
// records read in a shuffled order, and that it never holds more than
// twice Limit jobs while it reads.
func TestPicker(t *testing.T) {
	t0 := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	var all []*Job
	for i := range 500 {
		st := Succeeded
		if i%3 == 0 {
			st = Failed
		}
		// Every fourth pair shares a creation time, so the ID decides.
		all = append(all, &Job{ID: fmt.Sprintf("j%04d", i), State: st, Project: fmt.Sprintf("p%d", i%5),
			Created: t0.Add(time.Duration(i/2) * time.Second)})
	}
	rng := rand.New(rand.NewPCG(1, 2))
	shuffled := slices.Clone(all)
	rng.Shuffle(len(shuffled), func(a, b int) { shuffled[a], shuffled[b] = shuffled[b], shuffled[a] })

	keepP1 := func(j *Job) bool { return j.Project == "p1" }
	for _, f := range []Filter{
		{},
		{Limit: 10},
		{Limit: 10, Newest: true},
		{Limit: 1, Newest: true},
		{States: []State{Failed}, Limit: 7, Newest: true},
		{States: []State{Failed}, Limit: 7},
		{Keep: keepP1, Limit: 25, Newest: true},
		{Keep: keepP1, Limit: 1000, Newest: true},
	} {
		name := fmt.Sprintf("states=%v limit=%d newest=%v keep=%v", f.States, f.Limit, f.Newest, f.Keep != nil)
		var want []*Job
		for _, j := range all { // all is oldest first already
			if f.Match(j) {
				want = append(want, j)
			}
		}
		if f.Limit > 0 && len(want) > f.Limit {
			if f.Newest {
				want = want[len(want)-f.Limit:]
			} else {
				want = want[:f.Limit]
			}
		}
		p := f.Picker()
		most := 0
		for _, j := range shuffled {
			p.Add(j)
			most = max(most, len(p.out))
		}
		got := p.Jobs()
		if !slices.Equal(got, want) {
			t.Errorf("%s: got %d jobs %v…, want %d %v…", name, len(got), ids(got, 3), len(want), ids(want, 3))
		}
		if f.Limit > 0 && most > 2*f.Limit {
			t.Errorf("%s: held %d jobs while reading, want at most %d", name, most, 2*f.Limit)
		}
	}
}

func ids(js []*Job, n int) []string {
	var s []string
	for _, j := range js[:min(n, len(js))] {
		s = append(s, j.ID)
	}
	return s
}
