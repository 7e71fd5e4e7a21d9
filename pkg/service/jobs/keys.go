package jobs

import (
	"crypto/sha256"
	"encoding/hex"
	"time"
)

// Key is the record of one Idempotency-Key: the request it was first sent
// with and the resource that request creates. The record is written
// before the resource, with the resource's id already chosen, so a
// process that dies anywhere between the two leaves a record that a
// retry completes (the creation is done again under the same id, which
// the Store refuses to do twice) instead of a second resource.
type Key struct {
	// ID identifies the record: KeyID of the scope and the header value.
	ID string `json:"id"`
	// Fingerprint is a digest of the request's method, path, query and
	// body; a repeat with another fingerprint is refused.
	Fingerprint string `json:"fingerprint"`
	// Kind is what the request creates: "analysis", "series" or "frame".
	Kind string `json:"kind"`
	// Resource is the id of the job or series the request creates.
	Resource string `json:"resource"`
	// Series is the series of a frame.
	Series string `json:"series,omitempty"`
	// Done is set once the resource exists and the first answer was
	// given; a Done key whose resource is gone names a deleted resource.
	Done    bool      `json:"done,omitempty"`
	Created time.Time `json:"created"`
}

// KeyID returns the record id of the Idempotency-Key value key sent under
// scope (the client's credentials, "" without authentication): the hex
// SHA-256 of both, so keys of any characters fit every backend's key
// syntax and one client cannot see another's.
func KeyID(scope, key string) string {
	h := sha256.New()
	h.Write([]byte(scope))
	h.Write([]byte{0})
	h.Write([]byte(key))
	return hex.EncodeToString(h.Sum(nil))
}

// ValidKeyID reports whether id has the form KeyID returns.
func ValidKeyID(id string) bool {
	if len(id) != 2*sha256.Size {
		return false
	}
	for _, c := range id {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return false
		}
	}
	return true
}
