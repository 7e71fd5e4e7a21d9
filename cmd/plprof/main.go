package main

import (
	"context"
	"flag"
	"fmt"
	"os"
	"runtime/pprof"
	"time"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

func main() {
	dir := flag.String("in", "", "")
	out := flag.String("out", "", "")
	step := flag.Int("step", 8, "")
	prof := flag.String("prof", "", "")
	formats := flag.String("formats", "default", "")
	flag.Parse()
	lim := imageio.DefaultLimits()
	lim.MaxPixels = 1 << 30
	r, _ := imageio.ReadFile(*dir+"/reference.png", lim)
	d, _ := imageio.ReadFile(*dir+"/deformed.png", lim)
	p := analysis.Defaults()
	p.Subset, p.Step = 31, *step
	t0 := time.Now()
	res, err := analysis.RunJob(context.Background(), analysis.Job{Ref: r, Def: d, Params: p})
	if err != nil {
		panic(err)
	}
	t1 := time.Now()
	pf, _ := os.Create(*prof)
	pprof.StartCPUProfile(pf)
	set, _ := results.ParseFormats(*formats)
	_, err = results.Write(context.Background(), *out, res.Field, results.Sources{Ref: r, Def: d}, set)
	pprof.StopCPUProfile()
	fmt.Println("run", t1.Sub(t0), "write", time.Since(t1), err)
}
