package natsjs

import (
	"encoding/base64"
	"encoding/json"
	"fmt"
	"regexp"
	"sort"
	"strings"
	"sync"
	"testing"

	"github.com/nats-io/nats.go"
)

// tapEnv set to 1 makes BenchmarkClusterSeries count, with a subscription
// to every subject of the account, the messages and bytes published per
// frame by kind (blob chunks by the blob's kind, object metadata,
// records, job messages, acknowledgements, API requests and their
// answers) and print the table. The tap adds a delivery of every message
// to the nodes' work, so its runs are not timing runs.
const tapEnv = "MOTTLE_BENCH_TAP"

// tap counts what passes through the account.
type tap struct {
	mu    sync.Mutex
	kinds map[string]*tapCount
	nuid  map[string]string // chunk NUID → blob kind
	sub   *nats.Subscription
}

type tapCount struct{ msgs, bytes int }

var tapDigits = regexp.MustCompile(`[0-9A-Za-z]{16,}|\d{6}`)

// blobKind names the kind of the blob key name: its path with the job and
// series ids and the frame numbers taken out.
func blobKind(name string) string {
	f := strings.Split(name, "/")
	if len(f) > 1 {
		f[1] = "*"
	}
	return tapDigits.ReplaceAllString(strings.Join(f, "/"), "N")
}

func startTap(t testing.TB, nc *nats.Conn, bucket string) *tap {
	tp := &tap{kinds: map[string]*tapCount{}, nuid: map[string]string{}}
	chunks, meta := "$O."+bucket+".C.", "$O."+bucket+".M."
	pending := map[string][]int{} // chunks seen before their metadata
	sub, err := nc.Subscribe(">", func(m *nats.Msg) {
		n := len(m.Data)
		for k, v := range m.Header {
			n += len(k)
			for _, s := range v {
				n += len(s)
			}
		}
		s := m.Subject
		var kind string
		tp.mu.Lock()
		defer tp.mu.Unlock()
		switch {
		case strings.HasPrefix(s, chunks):
			id := s[len(chunks):]
			k, ok := tp.nuid[id]
			if !ok {
				pending[id] = append(pending[id], n)
				return
			}
			kind = "chunk " + k
		case strings.HasPrefix(s, meta):
			var info struct {
				Name    string `json:"name"`
				NUID    string `json:"nuid"`
				Deleted bool   `json:"deleted"`
			}
			_ = json.Unmarshal(m.Data, &info)
			if info.Name == "" {
				if b, err := base64.URLEncoding.DecodeString(s[len(meta):]); err == nil {
					info.Name = string(b)
				}
			}
			bk := blobKind(info.Name)
			tp.nuid[info.NUID] = bk
			for _, c := range pending[info.NUID] {
				tc := tp.count("chunk " + bk)
				tc.msgs++
				tc.bytes += c
			}
			delete(pending, info.NUID)
			kind = "meta " + bk
			if info.Deleted {
				kind = "delete " + bk
			}
		case strings.HasPrefix(s, "$KV."):
			f := strings.SplitN(s, ".", 3)
			kind = "record " + tapDigits.ReplaceAllString(f[len(f)-1], "N")
			if st := recordState(m.Data); st != "" {
				kind += " " + st
			}
		case strings.HasPrefix(s, "$JS.ACK."):
			kind = "ack " + string(m.Data)
			if len(kind) > 16 {
				kind = kind[:16]
			}
		case strings.HasPrefix(s, "$JS.API."):
			f := strings.Split(s, ".")
			kind = "api " + strings.Join(f[2:min(len(f), 5)], ".")
			if strings.HasPrefix(s, "$JS.API.STREAM.MSG.GET.") {
				// What is read: a record, an object's metadata or a chunk.
				var req struct {
					Last string `json:"last_by_subj"`
					Next string `json:"next_by_subj"`
				}
				_ = json.Unmarshal(m.Data, &req)
				switch {
				case strings.HasPrefix(req.Last, meta):
					b, _ := base64.URLEncoding.DecodeString(req.Last[len(meta):])
					kind += " meta " + blobKind(string(b))
				case strings.HasPrefix(req.Next, chunks):
					kind += " chunk " + tp.nuid[req.Next[len(chunks):]]
				case req.Last != "":
					kind += " record " + tapDigits.ReplaceAllString(req.Last, "N")
				}
			}
		case strings.HasPrefix(s, "_INBOX.") || strings.HasPrefix(s, "$JS.") && strings.Contains(s, "INBOX"):
			kind = "reply"
		default:
			kind = "subject " + tapDigits.ReplaceAllString(s, "N")
		}
		tc := tp.count(kind)
		tc.msgs++
		tc.bytes += n
	})
	if err != nil {
		t.Fatal(err)
	}
	tp.sub = sub
	return tp
}

// recordState returns the state of a job record, or "".
func recordState(data []byte) string {
	var r struct {
		Kind  string `json:"kind"`
		State string `json:"state"`
	}
	if json.Unmarshal(data, &r) != nil || r.State == "" {
		return ""
	}
	return r.State
}

func (tp *tap) count(kind string) *tapCount {
	c := tp.kinds[kind]
	if c == nil {
		c = &tapCount{}
		tp.kinds[kind] = c
	}
	return c
}

// table stops the tap and returns the counts per frame, largest first.
func (tp *tap) table(frames int) string {
	_ = tp.sub.Unsubscribe()
	tp.mu.Lock()
	defer tp.mu.Unlock()
	var ks []string
	total := tapCount{}
	for k, c := range tp.kinds {
		ks = append(ks, k)
		total.msgs += c.msgs
		total.bytes += c.bytes
	}
	sort.Slice(ks, func(i, j int) bool { return tp.kinds[ks[i]].bytes > tp.kinds[ks[j]].bytes })
	var b strings.Builder
	fmt.Fprintf(&b, "%-44s %10s %12s\n", "kind", "msgs/frame", "bytes/frame")
	for _, k := range ks {
		c := tp.kinds[k]
		fmt.Fprintf(&b, "%-44s %10.2f %12.0f\n", k, float64(c.msgs)/float64(frames), float64(c.bytes)/float64(frames))
	}
	fmt.Fprintf(&b, "%-44s %10.2f %12.0f\n", "total", float64(total.msgs)/float64(frames), float64(total.bytes)/float64(frames))
	return b.String()
}
