package natsjs

import (
	"testing"

	"github.com/mottledic/mottle/pkg/service/jobs"
	"github.com/mottledic/mottle/pkg/service/jobs/jobstest"
)

// TestAudit checks the audit trail's contract on a JetStream server, that
// it reads back the same through a new connection, and that the stream
// refuses to delete or purge entries.
func TestAudit(t *testing.T) {
	url := runServer(t)
	b := open(t, url, nil)
	ctx := testCtx(t)
	diff, err := jobstest.CheckAudit(ctx, b.Audit(), func() (jobs.Audit, error) {
		b.Close()
		b = open(t, url, nil)
		return b.Audit(), nil
	})
	if err != nil || diff != "" {
		t.Fatalf("%s %v", diff, err)
	}
	st, err := b.js.Stream(ctx, b.n.auditStream)
	if err != nil {
		t.Fatal(err)
	}
	if cfg := st.CachedInfo().Config; !cfg.DenyDelete || !cfg.DenyPurge || cfg.MaxAge != 0 || cfg.MaxMsgs > 0 || cfg.MaxBytes > 0 {
		t.Errorf("audit stream config %+v: want deny_delete, deny_purge and no limits", cfg)
	}
	if err := st.DeleteMsg(ctx, 1); err == nil {
		t.Error("an audit entry was deleted")
	}
	if err := st.Purge(ctx); err == nil {
		t.Error("the audit stream was purged")
	}
	if got, err := b.Audit().AuditEntries(ctx, jobs.AuditFilter{}); err != nil || len(got) != 6 {
		t.Errorf("after the delete and purge attempts: %d entries, %v; want the 6 appended", len(got), err)
	}
}
