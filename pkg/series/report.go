package series

import (
	"embed"
	"encoding/json"
	"fmt"
	"html/template"
	"io"
	"strconv"
	"strings"
	"time"
)

//go:embed templates/report.html
var templates embed.FS

// ReportMap is one map image shown in the report.
type ReportMap struct {
	// Path is the image path relative to the report.
	Path    string
	Caption string
}

// ReportInput is what WriteReport shows.
type ReportInput struct {
	Title    string
	Software string
	Created  time.Time
	Curve    Curve
	// Plots are curve images, paths relative to the report.
	Plots []string
	// Maps are map images of selected frames.
	Maps []ReportMap
}

type reportRow struct {
	Mode  string
	Cells []string
}

func fmtNum(v float64) string {
	if !finite(v) {
		return "–"
	}
	return strconv.FormatFloat(v, 'g', 6, 64)
}

func fmtPtr(p *float64) string {
	if p == nil {
		return "–"
	}
	return fmtNum(*p)
}

// modeText says in words which frames were done which way.
func modeText(c Curve) string {
	m := c.Modes()
	ranges := func(idx []int) string {
		var parts []string
		for i := 0; i < len(idx); {
			j := i
			for j+1 < len(idx) && idx[j+1] == idx[j]+1 {
				j++
			}
			if i == j {
				parts = append(parts, strconv.Itoa(idx[i]))
			} else {
				parts = append(parts, fmt.Sprintf("%d–%d", idx[i], idx[j]))
			}
			i = j + 1
		}
		return strings.Join(parts, ", ")
	}
	var out []string
	if d := m[ModeDirect]; len(d) > 0 {
		out = append(out, "correlated with the reference (direct): frames "+ranges(d))
	}
	if d := m[ModeIncremental]; len(d) > 0 {
		out = append(out, "correlated with the previous frame and composed at each material point (incremental): frames "+ranges(d))
	}
	if len(out) == 0 {
		return "No frames were added."
	}
	return "Frames " + strings.Join(out, "; ") + "."
}

// WriteReport writes the HTML report of a series: cautions, material
// properties with their ranges and fit quality, curve plots, the noise
// floor, a table of frames with the correlation mode of each, maps of
// selected frames and the settings.
func WriteReport(w io.Writer, in ReportInput) error {
	tpl, err := template.ParseFS(templates, "templates/report.html")
	if err != nil {
		return fmt.Errorf("report template: %w", err)
	}
	c := in.Curve
	p := c.Params.withDefaults()
	settings, err := json.MarshalIndent(p, "", "  ")
	if err != nil {
		return fmt.Errorf("report settings: %w", err)
	}
	pr := c.Properties()
	var noise [][3]string
	if c.Noise != nil {
		for _, n := range noiseNames {
			if s, ok := c.Noise.Std[n]; ok {
				noise = append(noise, [3]string{n, fmtNum(s), fmtNum(c.Noise.Mean[n])})
			}
		}
	}
	var extNames []string
	for _, e := range p.Extensometers {
		extNames = append(extNames, e.Name)
	}
	var rows []reportRow
	var flagged [][2]string
	for _, r := range c.Rows {
		if r.Quality != nil && r.Quality.Flagged {
			name := fmt.Sprintf("%d %s", r.Index, r.Name)
			for _, w := range r.Quality.Warnings {
				flagged = append(flagged, [2]string{name, w.Message + "; at the bench: " + w.Action + " (" + w.Source + ")"})
			}
		}
		cells := []string{strconv.Itoa(r.Index), r.Name, fmtPtr(r.Time), fmtPtr(r.Load), fmtPtr(r.Stress), r.Mode,
			fmtNum(r.ValidFraction), fmtNum(r.Tracked), fmtNum(r.MeanZNCC)}
		if r.Static {
			cells[5] += " (static)"
		}
		for i := range p.Extensometers {
			if i < len(r.Extensometers) && r.Extensometers[i].Valid {
				cells = append(cells, fmtNum(r.Extensometers[i].Eng))
			} else {
				cells = append(cells, "–")
			}
		}
		rows = append(rows, reportRow{Mode: r.Mode, Cells: cells})
	}
	title := in.Title
	if title == "" {
		title = "Test series report"
	}
	sw := in.Software
	if sw == "" {
		sw = "mottle"
	}
	data := map[string]any{
		"Flagged":    flagged,
		"Title":      title,
		"Software":   sw,
		"Created":    in.Created.UTC().Format(time.RFC3339),
		"Curve":      c,
		"Frames":     len(c.Rows) - 1,
		"Cautions":   Cautions(),
		"Properties": pr,
		"PropLines":  pr.Lines(),
		"Area":       p.Area,
		"Units":      p.Units,
		"Plots":      in.Plots,
		"Maps":       in.Maps,
		"NoiseRows":  noise,
		"ModeText":   modeText(c),
		"ExtNames":   extNames,
		"FrameRows":  rows,
		"Settings":   string(settings),
	}
	if err := tpl.Execute(w, data); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return nil
}
