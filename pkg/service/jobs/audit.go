package jobs

import (
	"context"
	"time"
)

// Audit actions.
const (
	AuditCreate      = "create"
	AuditCancel      = "cancel"
	AuditDelete      = "delete"
	AuditRename      = "rename"
	AuditTokenAdd    = "token-add"
	AuditTokenRevoke = "token-revoke"
	AuditTokenChange = "token-change"
)

// Audit resources: what an entry's ID names.
const (
	AuditAnalysis = "analysis"
	AuditSeries   = "series"
	AuditFrame    = "frame"
	AuditToken    = "token"
)

// AuditEntry is one record of the audit trail: who changed what, when,
// in which project, under which request.
type AuditEntry struct {
	// Seq is the entry's place in the trail, from 1, given by Append;
	// later entries have larger numbers (not always consecutive).
	Seq  uint64    `json:"seq"`
	Time time.Time `json:"time"`
	// Action is one of the Audit action constants.
	Action string `json:"action"`
	// Principal is who made the change ("token-file" for token changes,
	// which are read from the token file).
	Principal string `json:"principal"`
	// Project is the project of the analysis, series or frame.
	Project string `json:"project,omitempty"`
	// Projects are the projects a token entry's grants name.
	Projects []string `json:"projects,omitempty"`
	// Resource is one of the Audit resource constants; ID is the id of
	// the analysis, series or frame job, or the public id of a token
	// record (never the token).
	Resource string `json:"resource"`
	ID       string `json:"id"`
	// Series is the series of a frame.
	Series string `json:"series,omitempty"`
	// RequestID is the X-Request-Id of the request that made the change.
	RequestID string `json:"request_id,omitempty"`
	// Detail says more: the new name of a rename, the principal and
	// grants of a token entry.
	Detail string `json:"detail,omitempty"`
	// Dedupe, if not empty, lets a backend shared by several processes
	// drop an entry appended with the same Dedupe shortly before (two
	// API nodes noticing the same token-file change). It is not stored.
	Dedupe string `json:"-"`
}

// AuditFilter selects entries in Audit.AuditEntries. Zero fields match
// everything.
type AuditFilter struct {
	// After selects entries with Seq > After (a page's cursor).
	After uint64
	// Since selects entries at or after this time.
	Since time.Time
	// Resource selects entries of one resource kind.
	Resource string
	// Limit caps the number returned (0 = no cap).
	Limit int
}

// Match reports whether e passes the filter.
func (f AuditFilter) Match(e *AuditEntry) bool {
	return e.Seq > f.After && (f.Since.IsZero() || !e.Time.Before(f.Since)) &&
		(f.Resource == "" || e.Resource == f.Resource)
}

// Audit keeps the audit trail: entries are only appended, never changed
// or removed, and an appended entry is durable (it survives a crash of
// the process) when Append returns.
type Audit interface {
	// Append stores e at the end of the trail and sets e.Seq.
	Append(ctx context.Context, e *AuditEntry) error
	// AuditEntries returns the entries that match f, in trail order.
	AuditEntries(ctx context.Context, f AuditFilter) ([]*AuditEntry, error)
}
