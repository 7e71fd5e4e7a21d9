package jobs

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"strconv"
)

// idLen is the length of an id: 16 random bytes in lower-case hex.
const idLen = 32

// NewID returns a fresh random id of 32 lower-case hex digits.
func NewID() string {
	var b [idLen / 2]byte
	_, _ = rand.Read(b[:]) // crypto/rand.Read never fails (Go ≥ 1.24)
	return hex.EncodeToString(b[:])
}

// ValidID reports whether s has the form NewID returns. Only such ids are
// ever used in keys or paths, so no id can name anything outside its place.
func ValidID(s string) bool {
	if len(s) != idLen {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return false
		}
	}
	return true
}

// ValidName reports whether s is a safe blob key element: 1–64 characters
// from [A-Za-z0-9._-], not starting with a dot.
func ValidName(s string) bool {
	if len(s) == 0 || len(s) > 64 || s[0] == '.' {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'z' || 'A' <= c && c <= 'Z' || c == '.' || c == '_' || c == '-') {
			return false
		}
	}
	return true
}

// ValidKey reports whether key is a slash-separated list of valid names.
func ValidKey(key string) bool {
	start := 0
	for i := 0; i <= len(key); i++ {
		if i == len(key) || key[i] == '/' {
			if !ValidName(key[start:i]) {
				return false
			}
			start = i + 1
		}
	}
	return true
}

// JobKey is the blob prefix of everything of job id.
func JobKey(id string) string { return "jobs/" + id }

// InputKey is the blob key of an input of job id ("reference", "deformed", "mask").
func InputKey(id, name string) string { return "jobs/" + id + "/in/" + name }

// ResultKey is the blob key of result file name of job id.
func ResultKey(id, name string) string { return "jobs/" + id + "/out/" + name }

// SeriesKey is the blob key of name in series id; SeriesKey(id, "") is the prefix.
func SeriesKey(id, name string) string {
	if name == "" {
		return "series/" + id
	}
	return "series/" + id + "/" + name
}

// CheckID returns an error naming what when id is not a valid id.
func CheckID(what, id string) error {
	if !ValidID(id) {
		return fmt.Errorf("%s id %s is not 32 lower-case hex digits", what, strconv.Quote(id))
	}
	return nil
}
