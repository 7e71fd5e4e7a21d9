package service

import (
	"encoding/json"
	"fmt"
	"net/http"
	"time"

	"github.com/mottledic/mottle/pkg/service/jobs"
)

// keepAlive is the interval of comment lines that keep idle event streams open.
const keepAlive = 15 * time.Second

// startEvents prepares a server-sent event stream and returns a function
// that writes one event.
func startEvents(w http.ResponseWriter) func(event string, v any) error {
	rc := http.NewResponseController(w)
	_ = rc.SetWriteDeadline(time.Time{})
	h := w.Header()
	h.Set("Content-Type", "text/event-stream")
	h.Set("Cache-Control", "no-cache")
	h.Set("X-Accel-Buffering", "no")
	w.WriteHeader(http.StatusOK)
	_ = rc.Flush()
	return func(event string, v any) error {
		var err error
		if event == "" {
			_, err = fmt.Fprint(w, ": keep-alive\n\n")
		} else {
			b, _ := json.Marshal(v)
			_, err = fmt.Fprintf(w, "event: %s\ndata: %s\n\n", event, b)
		}
		if err == nil {
			err = rc.Flush()
		}
		return err
	}
}

// jobEvents streams a job: an event "status" with the job at every change
// (state or progress), then "done" with the final record, then the stream ends.
func (s *Server) jobEvents(w http.ResponseWriter, r *http.Request, j *jobs.Job) {
	ch, err := s.store.Watch(r.Context(), j.ID)
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	pump(s, r, ch, startEvents(w), func(j *jobs.Job) (string, any, bool) {
		if j.State.Terminal() {
			return "done", viewJob(j), true
		}
		return "status", viewJob(j), false
	})
}

// seriesEvents streams a series: "series" with the series first, then
// "frame" with a frame's job at every change of any frame, until the client
// goes away.
func (s *Server) seriesEvents(w http.ResponseWriter, r *http.Request, sr *jobs.Series) {
	ch, err := s.store.Watch(r.Context(), sr.ID)
	if err != nil {
		writeProblem(w, r, asProblem(err, "id"))
		return
	}
	send := startEvents(w)
	if send("series", s.viewSeries(r.Context(), sr, true)) != nil {
		return
	}
	pump(s, r, ch, send, func(j *jobs.Job) (string, any, bool) { return "frame", viewJob(j), false })
}

// pump sends every record from ch (job records, live values) as the event
// and data that name makes of it, with a keep-alive comment between
// records, until name says the record was the last, the channel closes,
// the client goes away or the server stops.
func pump[T any](s *Server, r *http.Request, ch <-chan T, send func(event string, v any) error, name func(T) (event string, data any, last bool)) {
	t := time.NewTicker(keepAlive)
	defer t.Stop()
	for {
		select {
		case j, ok := <-ch:
			if !ok {
				return
			}
			ev, data, last := name(j)
			if send(ev, data) != nil || last {
				return
			}
		case <-t.C:
			if send("", nil) != nil {
				return
			}
		case <-s.stopping:
			return
		case <-r.Context().Done():
			return
		}
	}
}
