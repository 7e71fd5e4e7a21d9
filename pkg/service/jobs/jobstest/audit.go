// Package jobstest checks implementations of the interfaces of package
// jobs, for the tests of the backends.
package jobstest

import (
	"context"
	"fmt"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// CheckAudit checks the contract of a jobs.Audit: entries appended get
// increasing Seq and read back unchanged in order, and the filters
// After, Since, Resource and Limit select what they say. reopen, if not
// nil, closes the backend and opens it again on the same data, and the
// entries must read back the same afterwards. It returns a description
// of the first difference, or "".
func CheckAudit(ctx context.Context, a jobs.Audit, reopen func() (jobs.Audit, error)) (string, error) {
	base := time.Now().UTC().Truncate(time.Millisecond)
	var in []*jobs.AuditEntry
	for i, r := range []string{jobs.AuditAnalysis, jobs.AuditToken, jobs.AuditSeries, jobs.AuditFrame, jobs.AuditToken, jobs.AuditAnalysis} {
		e := &jobs.AuditEntry{Time: base.Add(time.Duration(i) * time.Second), Action: jobs.AuditCreate, Principal: "rig-2",
			Project: "lab-a", Resource: r, ID: fmt.Sprintf("id%d", i), RequestID: fmt.Sprintf("r%d", i), Detail: "to \"x\""}
		if r == jobs.AuditToken {
			e.Project, e.Projects, e.Action = "", []string{"lab-a", "lab-b"}, jobs.AuditTokenAdd
		}
		if err := a.Append(ctx, e); err != nil {
			return "", fmt.Errorf("append %d: %w", i, err)
		}
		if len(in) > 0 && e.Seq <= in[len(in)-1].Seq {
			return fmt.Sprintf("entry %d got seq %d after %d", i, e.Seq, in[len(in)-1].Seq), nil
		}
		in = append(in, e)
	}
	pick := func(idx ...int) []*jobs.AuditEntry {
		var out []*jobs.AuditEntry
		for _, i := range idx {
			out = append(out, in[i])
		}
		return out
	}
	cases := []struct {
		f    jobs.AuditFilter
		want []*jobs.AuditEntry
	}{
		{jobs.AuditFilter{}, in},
		{jobs.AuditFilter{After: in[2].Seq}, pick(3, 4, 5)},
		{jobs.AuditFilter{Since: in[4].Time}, pick(4, 5)},
		{jobs.AuditFilter{Resource: jobs.AuditToken}, pick(1, 4)},
		{jobs.AuditFilter{Resource: jobs.AuditToken, After: in[1].Seq}, pick(4)},
		{jobs.AuditFilter{Limit: 2, After: in[0].Seq}, pick(1, 2)},
		{jobs.AuditFilter{After: in[5].Seq}, nil},
	}
	check := func(a jobs.Audit, when string) (string, error) {
		for _, c := range cases {
			got, err := a.AuditEntries(ctx, c.f)
			if err != nil {
				return "", fmt.Errorf("%s: entries %+v: %w", when, c.f, err)
			}
			if len(got) != len(c.want) {
				return fmt.Sprintf("%s: filter %+v: %d entries, want %d", when, c.f, len(got), len(c.want)), nil
			}
			for i := range got {
				g, w := *got[i], *c.want[i]
				if fmt.Sprint(g) != fmt.Sprint(w) || !g.Time.Equal(w.Time) {
					return fmt.Sprintf("%s: filter %+v: entry %d is %+v, want %+v", when, c.f, i, g, w), nil
				}
			}
		}
		return "", nil
	}
	if d, err := check(a, "before reopening"); d != "" || err != nil || reopen == nil {
		return d, err
	}
	a, err := reopen()
	if err != nil {
		return "", fmt.Errorf("reopen: %w", err)
	}
	return check(a, "after reopening")
}
