package runner

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// janitor applies the retention setting periodically.
func (s *Runner) janitor(ctx context.Context) {
	every := min(max(s.cfg.Retention/4, time.Second), 10*time.Minute)
	t := time.NewTicker(every)
	defer t.Stop()
	for {
		if n, err := s.sweep(ctx, time.Now().Add(-s.cfg.Retention)); err != nil {
			s.log.Error("retention sweep", "error", err)
		} else if n > 0 {
			s.log.Info("retention sweep", "removed", n)
		}
		select {
		case <-ctx.Done():
			return
		case <-t.C:
		}
	}
}

// sweep removes analyses finished before t and series last updated before
// t whose frames are all finished. It returns the number of records removed.
func (s *Runner) sweep(ctx context.Context, t time.Time) (int, error) {
	n := 0
	old, err := s.store.Jobs(ctx, jobs.Filter{Kind: jobs.Analysis, FinishedBefore: t})
	if err != nil {
		return 0, err
	}
	st, err := s.store.Jobs(ctx, jobs.Filter{Kind: jobs.Stereo, FinishedBefore: t})
	if err != nil {
		return 0, err
	}
	old = append(old, st...)
	var errs []error
	for _, j := range old {
		if err := s.DeleteJob(ctx, j.ID); err != nil {
			errs = append(errs, err)
			continue
		}
		n++
		s.auditRetention(ctx, jobs.AuditEntry{Resource: jobs.AuditAnalysis, ID: j.ID, Project: j.Project,
			Detail: "by the retention setting: finished before " + t.UTC().Format(time.RFC3339)})
	}
	all, err := s.store.AllSeries(ctx)
	if err != nil {
		return n, errors.Join(append(errs, err)...)
	}
	for _, sr := range all {
		if !sr.Updated.Before(t) {
			continue
		}
		m, err := s.DeleteSeries(ctx, sr.ID, true)
		n += m
		if err != nil {
			errs = append(errs, err)
		} else if m > 0 {
			s.auditRetention(ctx, jobs.AuditEntry{Resource: jobs.AuditSeries, ID: sr.ID, Project: sr.Project,
				Detail: fmt.Sprintf("by the retention setting: not updated since %s; with %d frame jobs", t.UTC().Format(time.RFC3339), m-1)})
		}
	}
	return n, errors.Join(errs...)
}

// retentionPrincipal is the principal of the audit entries of deletions
// by the retention setting.
const retentionPrincipal = "retention"

// auditRetention records a deletion by the retention setting in the
// backend's audit trail, if it has one; a failure is logged with the
// entry.
func (s *Runner) auditRetention(ctx context.Context, e jobs.AuditEntry) {
	a := s.cfg.Backend.Audit
	if a == nil {
		return
	}
	e.Time, e.Action, e.Principal = time.Now().UTC(), jobs.AuditDelete, retentionPrincipal
	if e.Project == "" {
		e.Project = "default"
	}
	if err := a.Append(ctx, &e); err != nil {
		s.log.Error("audit entry not stored", "error", err.Error(), "action", e.Action, "principal", e.Principal,
			"project", e.Project, "resource", e.Resource, "id", e.ID, "detail", e.Detail)
	}
}

// DeleteSeries removes a series, its frames and their blobs. With
// onlyIdle, a series with an unfinished frame is left alone.
func (s *Runner) DeleteSeries(ctx context.Context, id string, onlyIdle bool) (int, error) {
	frames, err := s.store.Jobs(ctx, jobs.Filter{Series: id})
	if err != nil {
		return 0, err
	}
	if onlyIdle {
		for _, f := range frames {
			if !f.State.Terminal() {
				return 0, nil
			}
		}
	}
	n := 0
	for _, f := range frames {
		if err := s.DeleteJob(ctx, f.ID); err != nil {
			return n, err
		}
		n++
	}
	if err := s.blobs.Delete(ctx, jobs.SeriesKey(id, "")); err != nil {
		return n, err
	}
	if err := s.store.DeleteSeries(ctx, id); err != nil && !errors.Is(err, jobs.ErrNotFound) {
		return n, err
	}
	return n + 1, nil
}
