package main

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/analysis"
	"github.com/mottledic/mottle/pkg/demo"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
)

func runDemo(ctx context.Context, e *env, args []string) error {
	fs := newFlags(e, "demo", "[flags]",
		"Render the built-in demo specimen exactly (an invented polymer plate with a hole under tension,\n"+
			"the Kirsch solution), analyse it, write a results folder and print the measured strain\n"+
			"beside the known truth. The specimen, lab and material are invented.")
	out := fs.String("out", "mottle-demo", "results `folder`")
	threads := fs.Int("threads", 0, "worker goroutines (0 = all cores)")
	formats := fs.String("formats", results.DefaultFormats+","+results.Images, "result `formats` to write, comma-separated (see mottle analyze --help)")
	if err := noArgs(e, fs, "demo", args); err != nil {
		return err
	}
	set, err := results.ParseFormats(*formats)
	if err != nil {
		return usagef("--formats: %w", err)
	}
	s := demo.Default()
	fmt.Fprintln(e.stdout, "Mottle demo (invented scenario)")
	fmt.Fprint(e.stdout, s.Describe())
	ref, def, err := s.Render()
	if err != nil {
		return err
	}
	if d, err := imageio.SpeckleSize(ref); err == nil {
		fmt.Fprintf(e.stdout, "  measured speckle size (autocorrelation, iDICs 2018): %.1f px\n\n", d)
	}
	p := s.Params()
	p.Threads = *threads
	pb := newBar(e, "correlating", "points")
	res, err := analysis.RunJob(ctx, analysis.Job{Ref: ref, Def: def, RefName: "demo reference", DefName: "demo deformed", Params: p, Progress: pb.update})
	pb.done()
	if err != nil {
		return err
	}
	if _, err := results.Write(ctx, *out, res.Field, results.Sources{Ref: ref, Def: def}, set); err != nil {
		return err
	}
	printSummary(e.stdout, res.Field, res.Elapsed)
	cmp, err := s.Compare(ctx, res.Field)
	if err != nil {
		return err
	}
	fmt.Fprintln(e.stdout, "\nmeasured against the exact truth (Green–Lagrange strain):")
	cmp.Print(e.stdout)
	fmt.Fprintf(e.stdout, "\nresults: %s/ (%s; more with mottle export %s --formats csv,vts,…)\n", *out, set, *out)
	fmt.Fprintf(e.stdout, "next: go run ./cmd/mottle map %s --quantity E22, or go run ./cmd/mottle serve and open http://127.0.0.1:8080/\n", *out)
	return nil
}
