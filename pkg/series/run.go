package series

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

// StateFile is the name of a results folder's tracker state, from which
// a stopped series continues (Resume).
const StateFile = "state.json"

// Start makes the tracker of a new series on ref (with the options of
// NewWith, or of NewLive when live is not nil) and writes its first state
// into the results folder out. The tracker of a live series is
// live.Tracker().
func Start(out string, ref *imageio.Gray, meta FrameMeta, p Params, opt Options, lo *LiveOptions) (*Tracker, *Live, error) {
	if err := os.MkdirAll(filepath.Join(out, "frames"), 0o755); err != nil {
		return nil, nil, err
	}
	var tr *Tracker
	var lv *Live
	var err error
	if lo != nil {
		if lv, err = NewLive(ref, meta, p, opt, *lo); err != nil {
			return nil, nil, err
		}
		tr = lv.Tracker()
	} else if tr, err = NewWith(ref, meta, p, opt); err != nil {
		return nil, nil, err
	}
	if err := WriteState(filepath.Join(out, StateFile), tr); err != nil {
		return nil, nil, err
	}
	return tr, lv, nil
}

// Resume restores the tracker of a series stopped earlier from
// out/state.json, reading with read the last frame it holds (of frames,
// the frame files without the reference). It returns the tracker and the
// number of frames it already holds: the series continues with
// frames[done].
func Resume(out string, ref *imageio.Gray, frames []string, read func(path string) (*imageio.Gray, error)) (tr *Tracker, done int, err error) {
	path := filepath.Join(out, StateFile)
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, 0, fmt.Errorf("the state of the stopped series: %w", err)
	}
	var st State
	if err := json.Unmarshal(b, &st); err != nil {
		return nil, 0, fmt.Errorf("%s: %w", path, err)
	}
	done = len(st.Curve) - 1
	if done < 0 {
		return nil, 0, fmt.Errorf("%s holds no reference; start the series again", path)
	}
	if done > len(frames) {
		return nil, 0, fmt.Errorf("the state has %d frames but only %d are given", done, len(frames))
	}
	var last *imageio.Gray
	if done > 0 {
		if last, err = read(frames[done-1]); err != nil {
			return nil, 0, err
		}
	}
	if tr, err = Restore(ref, last, st); err != nil {
		return nil, 0, err
	}
	return tr, done, nil
}

// StaticPairNoise correlates two images of the unloaded specimen, a and b
// (named aName and bName), with the analysis parameters of p and returns
// their noise floor.
func StaticPairNoise(ctx context.Context, a, b *imageio.Gray, aName, bName string, p Params) (*NoiseFloor, error) {
	p.Extensometers, p.Gauges, p.Properties = nil, nil, PropsParams{}
	p.StaticFrames = 1
	tr, err := New(a, FrameMeta{Name: aName}, p)
	if err != nil {
		return nil, err
	}
	if _, err := tr.Add(ctx, b, FrameMeta{Name: bName}); err != nil {
		return nil, err
	}
	return tr.NoiseFloor(), nil
}

// RunConfig says what Run does with a series of frame files.
type RunConfig struct {
	// Out is the results folder: frames/NNNN/ per frame, state.json,
	// curve.csv and curve.json, plots/ and report.html.
	Out string
	// Frames are the frame files, the reference not included; Metas their
	// metadata with the reference's first (see FrameMetas).
	Frames []string
	Metas  []FrameMeta
	// RefName names the reference image in every frame's field.
	RefName string
	// Orientation is the EXIF orientation the frames were turned by (the
	// reference's), recorded in each frame's field.
	Orientation imageio.Orientation
	// Formats are the formats of each frame's folder (default FrameFormats).
	Formats results.Set
	// Maps are the quantities drawn for the frames every MapEvery-th frame
	// and the last (MapEvery 0: about five frames spread over the series).
	Maps     []string
	MapEvery int
	// First is the number of frames the tracker already holds (a resumed
	// series continues with Frames[First]).
	First int
	// Noise, if not nil, is the noise floor to report when the series has
	// no static frames of its own (e.g. from a separate static pair).
	Noise *NoiseFloor
	// Read reads a frame file, turned as the reference; nil uses
	// imageio.ReadFile with the default limits.
	Read func(path string) (*imageio.Gray, error)
	// Progress, if not nil, is told which frame (0-based, of n) is being
	// worked on, with a label.
	Progress func(i, n int, label string)

	// Live, if not nil, runs the series live (the tracker is
	// Live.Tracker()): each frame's live values are computed first, on a
	// goroutine of their own, and handed to LiveRecord as a CSV record
	// (after a header record); the full field of the frames that need one
	// follows behind.
	Live       *Live
	LiveRecord func(rec []string) error
}

// Run adds the frames to tr one after the other, writing each frame's
// folder and state.json after each, and at the end (also after a failed or
// cancelled frame) the curve, the plots and the report. It returns the
// curve and the first error of the frame loop; finished frames and the
// report are kept either way, and a stopped series continues from
// state.json (Resume).
func Run(ctx context.Context, tr *Tracker, cfg RunConfig) (Curve, error) {
	if cfg.Read == nil {
		cfg.Read = func(p string) (*imageio.Gray, error) { return imageio.ReadFile(p, imageio.DefaultLimits()) }
	}
	set := cfg.Formats
	if set == nil {
		set, _ = results.ParseFormats(FrameFormats)
	}
	if len(cfg.Metas) != len(cfg.Frames)+1 {
		return tr.Curve(), fmt.Errorf("series run: %d frame metadata for %d frames and the reference; give one per frame and the reference's first", len(cfg.Metas), len(cfg.Frames))
	}
	if cfg.Live != nil && cfg.First > 0 {
		return tr.Curve(), errors.New("series run: a live run starts from the reference; resume without live")
	}
	every := cfg.MapEvery
	if every <= 0 {
		every = max(1, (len(cfg.Frames)+4)/5)
	}
	show := func(i int, label string) {
		if cfg.Progress != nil {
			cfg.Progress(i, len(cfg.Frames), label)
		}
	}
	var (
		todo    <-chan int
		liveErr <-chan error
	)
	liveCtx, stopLive := context.WithCancel(ctx)
	defer stopLive()
	if cfg.Live != nil {
		todo, liveErr = liveFrames(liveCtx, cfg)
	}
	statePath := filepath.Join(cfg.Out, StateFile)
	p := tr.Params()
	var reportMaps []ReportMap
	var runErr error
	for i := cfg.First; i < len(cfg.Frames); i++ {
		if todo != nil {
			n, ok := <-todo
			if !ok {
				break
			}
			i = n
		}
		show(i, cfg.Metas[i+1].Name)
		img, err := cfg.Read(cfg.Frames[i])
		if err != nil {
			runErr = err
			break
		}
		meta := cfg.Metas[i+1]
		meta.Orientation = cfg.Orientation
		meta.Progress = func(done, total int) { show(i, fmt.Sprintf("%s %d/%d points", cfg.Metas[i+1].Name, done, total)) }
		var fr *Frame
		if cfg.Live != nil {
			fr, err = cfg.Live.FullField(ctx, i+1, img)
		} else {
			fr, err = tr.Add(ctx, img, meta)
		}
		if err != nil {
			runErr = err
			break
		}
		dir := filepath.Join(cfg.Out, "frames", fmt.Sprintf("%04d", i+1))
		var mq []string
		if (i+1)%every == 0 || i == len(cfg.Frames)-1 {
			mq = cfg.Maps
		}
		if _, err := WriteFrameFormats(ctx, dir, fr, p, cfg.RefName, cfg.Metas[i+1], img, set, mq); err != nil {
			runErr = err
			break
		}
		for _, q := range mq {
			reportMaps = append(reportMaps, ReportMap{
				Path:    filepath.ToSlash(filepath.Join("frames", fmt.Sprintf("%04d", i+1), "map_"+q+".png")),
				Caption: fmt.Sprintf("%s, frame %d %s (%s)", q, i+1, cfg.Metas[i+1].Name, fr.Summary.Mode)})
		}
		if err := WriteState(statePath, tr); err != nil {
			runErr = err
			break
		}
	}
	show(tr.Len(), "")
	c := tr.Curve()
	if cfg.Live != nil {
		if runErr != nil {
			stopLive()
		}
		if err := <-liveErr; err != nil && runErr == nil {
			runErr = err
		}
		c = cfg.Live.Curve()
	}
	if cfg.Noise != nil && c.Noise == nil {
		c.Noise = cfg.Noise
	}
	if err := WriteOutputs(cfg.Out, c, reportMaps); err != nil {
		return c, errors.Join(runErr, err)
	}
	return c, runErr
}

// liveFrames runs the live path of Run on its own goroutine: each frame
// is read and its live values handed to cfg.LiveRecord (a header record
// first), and its index is then sent on the channel for the full field.
// The error channel gets one value (nil when every frame was done) when it
// ends; the index channel is closed.
func liveFrames(ctx context.Context, cfg RunConfig) (<-chan int, <-chan error) {
	todo := make(chan int, len(cfg.Frames))
	errc := make(chan error, 1)
	write := cfg.LiveRecord
	if write == nil {
		write = func([]string) error { return nil }
	}
	lv := cfg.Live
	go func() {
		defer close(todo)
		if err := write(LiveCSVHeader(lv.Params())); err != nil {
			errc <- fmt.Errorf("live output: %w", err)
			return
		}
		for i, f := range cfg.Frames {
			img, err := cfg.Read(f)
			if err != nil {
				errc <- err
				return
			}
			if err := ctx.Err(); err != nil {
				errc <- err
				return
			}
			v, err := lv.Frame(ctx, img, cfg.Metas[i+1])
			if err != nil {
				errc <- err
				return
			}
			if err := write(v.CSVRecord()); err != nil {
				errc <- fmt.Errorf("live output: %w", err)
				return
			}
			if v.Full {
				todo <- i
			}
		}
		errc <- nil
	}()
	return todo, errc
}

// WriteState writes the tracker's state to path atomically.
func WriteState(path string, tr *Tracker) error {
	b, err := json.Marshal(tr.State())
	if err != nil {
		return err
	}
	return field.WriteFileAtomic(path, 0o644, func(w io.Writer) error { _, err := w.Write(b); return err })
}

// WriteOutputs writes the curve files, the plots and the report of a
// series into out.
func WriteOutputs(out string, c Curve, maps []ReportMap) error {
	if _, err := WriteCurve(out, c); err != nil {
		return err
	}
	plotDir := filepath.Join(out, "plots")
	if err := os.MkdirAll(plotDir, 0o755); err != nil {
		return err
	}
	plots, err := WritePlots(plotDir, c, c.Properties())
	if err != nil {
		return err
	}
	for i, p := range plots {
		rel, err := filepath.Rel(out, p)
		if err != nil {
			return err
		}
		plots[i] = filepath.ToSlash(rel)
	}
	return field.WriteFileAtomic(filepath.Join(out, "report.html"), 0o644, func(w io.Writer) error {
		return WriteReport(w, ReportInput{Title: "Test series report", Software: "mottle series", Created: time.Now(), Curve: c, Plots: plots, Maps: maps})
	})
}
