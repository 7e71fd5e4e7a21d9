package service

import (
	"archive/zip"
	"bytes"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"path"
	"regexp"
	"strconv"
	"strings"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// damage is one problem found in the data directory.
type damage struct {
	job    string
	state  jobs.State
	reason string
}

// checkData looks, before the workers start, for jobs whose files are
// damaged or gone (a crash outside Mottle, a disk error, a person's hand):
// a queued or running job whose input images are missing, a succeeded job
// whose result files are missing or cut short, a frame whose series
// record is gone. It logs what it found, marks those jobs failed with the
// reason, so that clients see why instead of an error on download or a
// job that never runs, and leaves the rest to be served. It returns the
// number of jobs it marked failed.
func (s *Server) checkData(ctx context.Context) (int, error) {
	start := time.Now()
	// Records the backend could not read were moved aside when it opened,
	// so that the lists below work; say which.
	for _, a := range s.cfg.Backend.SetAside {
		s.log.Warn("damaged data: record set aside", "record", a)
	}
	list, err := s.store.Jobs(ctx, jobs.Filter{})
	if err != nil {
		return 0, fmt.Errorf("check the data directory: %w", err)
	}
	series := map[string]bool{}
	all, err := s.store.AllSeries(ctx)
	if err != nil {
		return 0, fmt.Errorf("check the data directory: %w", err)
	}
	for _, sr := range all {
		series[sr.ID] = true
	}
	var found []damage
	for _, j := range list {
		if reason := s.jobDamage(ctx, j, series); reason != "" {
			found = append(found, damage{j.ID, j.State, reason})
		}
	}
	now := time.Now().UTC()
	marked := 0
	for _, d := range found {
		s.log.Warn("damaged data: job marked failed", "job", d.job, "was", d.state, "reason", d.reason)
		_, err := s.store.UpdateJob(ctx, d.job, func(j *jobs.Job) error {
			j.State, j.Finished = jobs.Failed, &now
			j.Error = &jobs.Failure{Title: "Damaged data", Detail: d.reason +
				"; the server found this when it started, after a crash or a change to its data directory made outside Mottle. Submit the job again"}
			return nil
		})
		if err != nil {
			s.log.Error("mark damaged job failed", "job", d.job, "error", err)
			continue
		}
		marked++
	}
	s.damaged.Store(int64(marked))
	s.log.Info("data directory checked", "jobs", len(list), "series", len(all), "damaged", marked,
		"set_aside", len(s.cfg.Backend.SetAside),
		"seconds", time.Since(start).Seconds())
	return marked, nil
}

// jobDamage says what is wrong with the stored files of j, or "".
func (s *Server) jobDamage(ctx context.Context, j *jobs.Job, series map[string]bool) string {
	if j.State == jobs.Failed || j.State == jobs.Canceled {
		return ""
	}
	if j.Kind == jobs.Frame && !series[j.Series] {
		return fmt.Sprintf("the record of its series %s is missing", j.Series)
	}
	switch j.State {
	case jobs.Queued, jobs.Running:
		ref := jobs.InputKey(j.ID, "reference")
		if j.Kind == jobs.Frame {
			ref = jobs.SeriesKey(j.Series, "reference")
		}
		keys := []string{ref, jobs.InputKey(j.ID, "deformed")}
		if j.HasMask && j.Kind == jobs.Analysis {
			keys = append(keys, jobs.InputKey(j.ID, "mask"))
		}
		for _, k := range keys {
			if err := s.blobExists(ctx, k); err != nil {
				return fmt.Sprintf("its input image %s cannot be read (%v)", path.Base(k), err)
			}
		}
	case jobs.Succeeded:
		for _, name := range j.Results {
			if err := s.checkResult(ctx, jobs.ResultKey(j.ID, name), name); err != nil {
				return fmt.Sprintf("its result file %s is damaged: %v", name, err)
			}
		}
	}
	return ""
}

func (s *Server) blobExists(ctx context.Context, key string) error {
	rc, err := s.blobs.Get(ctx, key)
	if err != nil {
		if errors.Is(err, jobs.ErrNotFound) {
			return errors.New("missing")
		}
		return err
	}
	return rc.Close()
}

// sizedReaderAt is a stored blob that can be read at an offset (a file).
type sizedReaderAt interface {
	io.ReaderAt
	Stat() (fs.FileInfo, error)
}

// checkResult checks that a stored result file is whole, by what its
// format puts at its end: a zip archive's central directory (field.npz),
// the size an NPY header declares, PNG's IEND chunk, the closing of a
// JSON document or of the VTK XML file, a CSV's last line end. A file
// cut short by a crash or a full disk fails these; a file whose bytes
// were changed in the middle may not (the blobs carry no checksums).
func (s *Server) checkResult(ctx context.Context, key, name string) error {
	rc, err := s.blobs.Get(ctx, key)
	if err != nil {
		if errors.Is(err, jobs.ErrNotFound) {
			return errors.New("missing")
		}
		return err
	}
	defer rc.Close()
	var ra io.ReaderAt
	var size int64
	if f, ok := rc.(sizedReaderAt); ok {
		st, err := f.Stat()
		if err != nil {
			return err
		}
		ra, size = f, st.Size()
	} else {
		b, err := io.ReadAll(rc)
		if err != nil {
			return err
		}
		ra, size = bytes.NewReader(b), int64(len(b))
	}
	if size == 0 {
		return errors.New("empty")
	}
	tail := func(n int64) []byte {
		n = min(n, size)
		b := make([]byte, n)
		if _, err := ra.ReadAt(b, size-n); err != nil && !errors.Is(err, io.EOF) {
			return nil
		}
		return b
	}
	cut := fmt.Errorf("cut short (%d bytes)", size)
	switch {
	case strings.HasSuffix(name, ".npz"), strings.HasSuffix(name, ".zip"):
		if _, err := zip.NewReader(ra, size); err != nil {
			return fmt.Errorf("%w: %v", cut, err)
		}
	case strings.HasSuffix(name, ".npy"):
		return checkNPY(ra, size)
	case strings.HasSuffix(name, ".png"):
		if !bytes.Equal(tail(12), []byte{0, 0, 0, 0, 'I', 'E', 'N', 'D', 0xae, 0x42, 0x60, 0x82}) {
			return fmt.Errorf("%w: no PNG end chunk", cut)
		}
	case strings.HasSuffix(name, ".json"):
		t := bytes.TrimSpace(tail(64))
		if len(t) == 0 || (t[len(t)-1] != '}' && t[len(t)-1] != ']') {
			return fmt.Errorf("%w: the JSON document is not closed", cut)
		}
	case strings.HasSuffix(name, ".vts"):
		if !bytes.HasSuffix(bytes.TrimSpace(tail(64)), []byte("</VTKFile>")) {
			return fmt.Errorf("%w: the VTK file is not closed", cut)
		}
	case strings.HasSuffix(name, ".csv"):
		if t := tail(1); len(t) != 1 || t[0] != '\n' {
			return fmt.Errorf("%w: the last line is not ended", cut)
		}
	}
	return nil
}

var npyShape = regexp.MustCompile(`'descr':\s*'[<>|]?[a-z](\d+)'.*'shape':\s*\(([\d,\s]*)\)`)

// checkNPY compares an NPY file's size with the size its header declares
// (NumPy's format description, versions 1 to 3).
func checkNPY(ra io.ReaderAt, size int64) error {
	head := make([]byte, min(size, 4096))
	if _, err := ra.ReadAt(head, 0); err != nil && !errors.Is(err, io.EOF) {
		return err
	}
	if len(head) < 10 || string(head[:6]) != "\x93NUMPY" {
		return errors.New("not an NPY file")
	}
	var hlen, off int64
	if head[6] == 1 {
		hlen, off = int64(binary.LittleEndian.Uint16(head[8:10])), 10
	} else {
		if len(head) < 12 {
			return errors.New("NPY header cut short")
		}
		hlen, off = int64(binary.LittleEndian.Uint32(head[8:12])), 12
	}
	if off+hlen > int64(len(head)) {
		return errors.New("NPY header cut short")
	}
	m := npyShape.FindSubmatch(head[off : off+hlen])
	if m == nil {
		return nil // a header this check does not read: not judged
	}
	n, _ := strconv.ParseInt(string(m[1]), 10, 64)
	for _, d := range strings.Split(string(m[2]), ",") {
		if d = strings.TrimSpace(d); d != "" {
			k, _ := strconv.ParseInt(d, 10, 64)
			n *= k
		}
	}
	if want := off + hlen + n; size < want {
		return fmt.Errorf("cut short (%d of %d bytes)", size, want)
	}
	return nil
}
