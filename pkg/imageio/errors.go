package imageio

import "errors"

// Sentinel errors. Every error returned by this package wraps one of them,
// so callers (the HTTP service, the CLI) can tell the cases apart with
// errors.Is and map them to status codes or exit messages.
var (
	// ErrTooLarge: the image declares more pixels, or the file has more
	// bytes, than the Limits allow. Nothing was decoded.
	ErrTooLarge = errors.New("image too large")
	// ErrFormat: the data is not a supported image format (PNG, TIFF, JPEG, BMP).
	ErrFormat = errors.New("unsupported image format")
	// ErrCorrupt: the data starts like a supported format but is truncated
	// or damaged.
	ErrCorrupt = errors.New("corrupt or truncated image")
	// ErrSizeMismatch: the reference and deformed images differ in size.
	ErrSizeMismatch = errors.New("image sizes differ")
	// ErrTooSmall: the image is empty or smaller than one subset.
	ErrTooSmall = errors.New("image too small")
	// ErrNoContrast: the image has (almost) no grey-level variation, so
	// there is no pattern to correlate.
	ErrNoContrast = errors.New("image has no contrast")
	// ErrBits: an unsupported bit depth was requested.
	ErrBits = errors.New("unsupported bit depth")
)
