package service

import (
	"context"
	"fmt"

	"github.com/mottledic/mottle/pkg/field"
	"github.com/mottledic/mottle/pkg/imageio"
	"github.com/mottledic/mottle/pkg/results"
	"github.com/mottledic/mottle/pkg/runner"
	"github.com/mottledic/mottle/pkg/service/jobs"
)

// The computation behind the service is package runner's; these names
// keep the service's API as it was before the runner was split off.
type (
	// Analyzer is runner.Analyzer.
	Analyzer = runner.Analyzer
	// FrameAnalyzer is runner.FrameAnalyzer.
	FrameAnalyzer = runner.FrameAnalyzer
	// Input is runner.Input.
	Input = runner.Input
	// FrameInput is runner.FrameInput.
	FrameInput = runner.FrameInput
	// Result is runner.Result.
	Result = runner.Result
	// MapRequest is runner.MapRequest.
	MapRequest = runner.MapRequest
	// FieldError is runner.FieldError.
	FieldError = runner.FieldError
	// Pipeline is runner.Pipeline, the Analyzer of the real pipeline.
	Pipeline = runner.Pipeline
)

// DefaultFormats is runner.DefaultFormats.
const DefaultFormats = runner.DefaultFormats

// SeriesDefaultFormats is runner.SeriesDefaultFormats.
const SeriesDefaultFormats = runner.SeriesDefaultFormats

// ParseFormats is runner.ParseFormats.
func ParseFormats(s string) (results.Set, error) { return runner.ParseFormats(s) }

// Encode is runner.Encode.
func Encode(f *field.Field) (*Result, error) { return runner.Encode(f) }

// EncodeFormats is runner.EncodeFormats.
func EncodeFormats(f *field.Field, formats string) (*Result, error) {
	return runner.EncodeFormats(f, formats)
}

// RenderMap is runner.RenderMap.
func RenderMap(f *field.Field, req MapRequest, bg *imageio.Gray) ([]byte, error) {
	return runner.RenderMap(f, req, bg)
}

func (s *Server) cancelJob(ctx context.Context, id string) (*jobs.Job, error) {
	return s.run.Cancel(ctx, id)
}

func (s *Server) deleteJob(ctx context.Context, id string) error { return s.run.DeleteJob(ctx, id) }

func (s *Server) deleteSeries(ctx context.Context, id string, onlyIdle bool) (int, error) {
	return s.run.DeleteSeries(ctx, id, onlyIdle)
}

func (s *Server) loadImage(ctx context.Context, key string) (*imageio.Gray, error) {
	return s.run.LoadImage(ctx, key)
}

func (s *Server) readBlob(ctx context.Context, key string) ([]byte, error) {
	return s.run.ReadBlob(ctx, key)
}

func (s *Server) limits() imageio.Limits { return s.run.Limits() }

// frames returns the frame jobs of sr in frame order.
func (s *Server) frames(ctx context.Context, sr *jobs.Series) ([]*jobs.Job, error) {
	return s.run.Frames(ctx, sr.ID)
}

func stateKey(seriesID string, n int) string { return runner.StateKey(seriesID, n) }

func formatOf(name string) string { return runner.FormatOf(name) }

var (
	readStored  = runner.ReadStored
	encodeFiles = runner.EncodeFiles
)

// upright turns g by the EXIF orientation o (imageio.Orient); what names g
// in the problem document of an error.
func upright(what string, g *imageio.Gray, o imageio.Orientation) (*imageio.Gray, error) {
	t, err := imageio.Orient(g, o)
	if err != nil {
		return nil, asProblem(fmt.Errorf("%s: %w", what, err), what)
	}
	return t, nil
}
