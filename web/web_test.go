package web_test

import (
	"io/fs"
	"regexp"
	"strings"
	"testing"

	"github.com/mottledic/mottle/web"
)

// TestAssetsSelfContained checks that the page works offline: index.html
// is at the root, every file that a page or module refers to is embedded,
// and no asset loads anything from another origin.
func TestAssetsSelfContained(t *testing.T) {
	assets := web.Assets()
	if _, err := fs.Stat(assets, "index.html"); err != nil {
		t.Fatalf("index.html is not at the root of the assets: %v", err)
	}
	refs := regexp.MustCompile(`(?:src|href)="([^"]+)"|(?:from|import)\s*'([^']+)'|(?:from|import)\s*"([^"]+)"`)
	external := regexp.MustCompile(`(?i)(?:https?:)?//[a-z0-9.-]+\.[a-z]{2,}/`)
	n := 0
	err := fs.WalkDir(assets, ".", func(path string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		n++
		b, err := fs.ReadFile(assets, path)
		if err != nil {
			return err
		}
		text := string(b)
		if m := external.FindString(text); m != "" {
			t.Errorf("%s refers to another origin (%s); the preview must work offline", path, m)
		}
		if !strings.HasSuffix(path, ".html") && !strings.HasSuffix(path, ".js") {
			return nil
		}
		dir := ""
		if i := strings.LastIndex(path, "/"); i >= 0 {
			dir = path[:i+1]
		}
		for _, m := range refs.FindAllStringSubmatch(text, -1) {
			ref := m[1] + m[2] + m[3]
			if strings.HasPrefix(ref, "data:") || strings.HasPrefix(ref, "#") || strings.HasPrefix(ref, "/v1/") {
				continue
			}
			target := clean(dir + strings.TrimPrefix(ref, "./"))
			if _, err := fs.Stat(assets, target); err != nil {
				t.Errorf("%s refers to %q, which is not embedded (%s)", path, ref, target)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n < 5 {
		t.Errorf("only %d asset files embedded", n)
	}
}

// clean resolves "a/../b" in slash paths.
func clean(p string) string {
	var out []string
	for _, s := range strings.Split(p, "/") {
		switch s {
		case "", ".":
		case "..":
			if len(out) > 0 {
				out = out[:len(out)-1]
			}
		default:
			out = append(out, s)
		}
	}
	return strings.Join(out, "/")
}
