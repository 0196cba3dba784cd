package web

import (
	"context"
	"encoding/json"
	"errors"
	"net/http"
	"time"

	"plumb/connectors"
)

// The JSON API. Every answer is a JSON document; errors are
// {"error": "..."} with a 4xx or 5xx status.
//
//	GET /api/watches                         []WatchSummary
//	GET /api/watches/{name}                  WatchDetail without reports (each
//	    segment with its factors and new_levels)
//	GET /api/watches/{name}/history?segment= []Point, oldest first (each
//	    with its factors)
//	    (segment: a value, "NULL" for NULL, a quoted value such as ""
//	    for the empty string; none for the whole table)
//	GET /api/watches/{name}/runs             []Run, newest first
//	GET /api/watches/{name}/report?segment=  diagnostics.Report of the last run
//	GET /api/alerts?state=open|all           []Alert of every watch, newest first

const apiTimeout = 15 * time.Second

func (s *Server) apiWatches(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	ws, err := s.opt.View.Watches(ctx)
	if err != nil {
		s.apiError(w, r, err)
		return
	}
	if ws == nil {
		ws = []WatchSummary{}
	}
	writeJSON(w, http.StatusOK, ws)
}

func (s *Server) watch(w http.ResponseWriter, r *http.Request) (*WatchDetail, bool) {
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	d, err := s.opt.View.Watch(ctx, r.PathValue("name"))
	if err != nil {
		s.apiError(w, r, err)
		return nil, false
	}
	return d, true
}

func (s *Server) segment(w http.ResponseWriter, r *http.Request, d *WatchDetail) (*SegmentDetail, bool) {
	name := r.URL.Query().Get("segment")
	var seg *SegmentDetail
	if key, err := connectors.KeyOfLabel(name); err == nil {
		seg = d.Segment(key)
	}
	if seg == nil {
		writeJSON(w, http.StatusNotFound, map[string]string{"error": "watch " + d.Summary.Name + " has no segment " + quote(name)})
		return nil, false
	}
	return seg, true
}

func (s *Server) apiWatch(w http.ResponseWriter, r *http.Request) {
	d, ok := s.watch(w, r)
	if !ok {
		return
	}
	c := *d
	c.Segments = make([]SegmentDetail, len(d.Segments))
	for i, seg := range d.Segments {
		seg.Report = nil // large; served by /report
		c.Segments[i] = seg
	}
	writeJSON(w, http.StatusOK, c)
}

func (s *Server) apiHistory(w http.ResponseWriter, r *http.Request) {
	d, ok := s.watch(w, r)
	if !ok {
		return
	}
	seg, ok := s.segment(w, r, d)
	if !ok {
		return
	}
	tl := seg.Timeline
	if tl == nil {
		tl = []Point{}
	}
	writeJSON(w, http.StatusOK, tl)
}

func (s *Server) apiRuns(w http.ResponseWriter, r *http.Request) {
	d, ok := s.watch(w, r)
	if !ok {
		return
	}
	runs := d.Runs
	if runs == nil {
		runs = []Run{}
	}
	writeJSON(w, http.StatusOK, runs)
}

func (s *Server) apiReport(w http.ResponseWriter, r *http.Request) {
	d, ok := s.watch(w, r)
	if !ok {
		return
	}
	seg, ok := s.segment(w, r, d)
	if !ok {
		return
	}
	if seg.Report == nil {
		writeJSON(w, http.StatusNotFound, map[string]string{"error": "watch " + d.Summary.Name + " has no successful run yet"})
		return
	}
	writeJSON(w, http.StatusOK, seg.Report)
}

func (s *Server) apiAlerts(w http.ResponseWriter, r *http.Request) {
	state := r.URL.Query().Get("state")
	if state != "" && state != "open" && state != "all" {
		writeJSON(w, http.StatusBadRequest, map[string]string{"error": "state must be open or all"})
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), apiTimeout)
	defer cancel()
	alerts, err := allAlerts(ctx, s.opt.View, state == "open")
	if err != nil {
		s.apiError(w, r, err)
		return
	}
	writeJSON(w, http.StatusOK, alerts)
}

// allAlerts gathers the alerts of every watch, newest first.
func allAlerts(ctx context.Context, v View, openOnly bool) ([]Alert, error) {
	ws, err := v.Watches(ctx)
	if err != nil {
		return nil, err
	}
	out := []Alert{}
	for _, ws := range ws {
		d, err := v.Watch(ctx, ws.Name)
		if err != nil {
			return nil, err
		}
		for _, a := range d.Alerts {
			if !openOnly || a.Open() {
				out = append(out, a)
			}
		}
	}
	sortNewest(out)
	return out, nil
}

func (s *Server) apiError(w http.ResponseWriter, r *http.Request, err error) {
	if errors.Is(err, ErrNotFound) {
		writeJSON(w, http.StatusNotFound, map[string]string{"error": err.Error()})
		return
	}
	s.opt.Logger.Error("state store", "path", r.URL.Path, "err", err)
	writeJSON(w, http.StatusServiceUnavailable, map[string]string{"error": "state store: " + err.Error()})
}

func writeJSON(w http.ResponseWriter, status int, v any) {
	b, err := json.MarshalIndent(v, "", "  ")
	if err != nil {
		status = http.StatusInternalServerError
		b, _ = json.Marshal(map[string]string{"error": "encoding the answer: " + err.Error()})
	}
	w.Header().Set("Content-Type", "application/json; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(status)
	w.Write(append(b, '\n'))
}

func quote(s string) string { b, _ := json.Marshal(s); return string(b) }
