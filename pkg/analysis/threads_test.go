package analysis

import (
	"bytes"
	"context"
	"testing"
	"time"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/synth"
)

// TestJobThreadsNotRecorded: a job computed on more threads than its
// parameters say (Job.Threads, the idle cores a service job takes) writes
// the same field.json, byte for byte, as one computed on Params.Threads,
// with Params.Threads recorded. Results never depend on the thread count
// (pkg/correlate TestDeterministicAcrossThreads), so neither may the files.
func TestJobThreadsNotRecorded(t *testing.T) {
	po := synth.PatternOptions{Seed: 4, EdgeBlur: 1}
	ref, def, err := synth.Pair(po, synth.Translation{U: 0.4, V: -0.3}, synth.RenderOptions{W: 128, H: 128})
	if err != nil {
		t.Fatal(err)
	}
	p := Defaults()
	p.Subset, p.Step, p.Threads = 21, 8, 1
	encode := func(threads int) []byte {
		out, err := RunJob(context.Background(), Job{Ref: ref, Def: def, Params: p, Threads: threads})
		if err != nil {
			t.Fatal(err)
		}
		// The wall time and speed differ from run to run by nature.
		delete(out.Field.Meta.Extra, "elapsed_s")
		delete(out.Field.Meta.Extra, "points_per_second")
		// So does the creation time: two runs can fall in different seconds.
		out.Field.Meta.Created = time.Time{}
		var b bytes.Buffer
		if err := field.WriteJSON(&b, out.Field); err != nil {
			t.Fatal(err)
		}
		return b.Bytes()
	}
	one, three := encode(0), encode(3)
	if !bytes.Equal(one, three) {
		i := 0
		for i < min(len(one), len(three)) && one[i] == three[i] {
			i++
		}
		t.Fatalf("field.json on 3 threads differs from 1 thread at byte %d: %.80q against %.80q", i, three[i:], one[i:])
	}
	if !bytes.Contains(one, []byte(`"threads":1`)) {
		t.Errorf("field.json does not record the parameters' thread count 1")
	}
}
