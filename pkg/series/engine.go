package series

import (
	"errors"

	"github.com/mottledic/mottle/pkg/imageio"
)

// New starts a series on the reference image ref, whose own time stamp and
// load (usually zero) are in meta, with parameters p (zero fields take the
// defaults of Defaults). It validates p against the image and returns every
// problem at once.
func New(ref *imageio.Gray, meta FrameMeta, p Params) (*Tracker, error) {
	c, err := newCorrelator(ref, p.withDefaults())
	if err != nil {
		return nil, err
	}
	return newTracker(ref, meta, p, c)
}

// newCorrelator builds the production correlator on pkg/correlate.
func newCorrelator(ref *imageio.Gray, p Params) (correlator, error) {
	return nil, errors.New("series: the correlation engine (pkg/correlate) is not wired in yet")
}
