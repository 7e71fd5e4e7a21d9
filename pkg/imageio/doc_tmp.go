package imageio

// Temporary blank imports that pin the chosen dependencies in go.mod while
// the packages that use them are written. Removed once each is imported for real.
import (
	_ "github.com/chromedp/chromedp"
	_ "github.com/disintegration/imaging"
	_ "github.com/go-chi/chi/v5"
	_ "github.com/nats-io/nats-server/v2/server"
	_ "github.com/nats-io/nats.go"
	_ "go.etcd.io/bbolt"
	_ "golang.org/x/image/tiff"
	_ "golang.org/x/term"
	_ "gonum.org/v1/gonum/mat"
	_ "gonum.org/v1/plot"
)
