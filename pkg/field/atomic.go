package field

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// WriteFileAtomic writes a file so that readers see either the old content or
// the complete new one, never a partial file: write is called with a buffered
// writer on a temporary file in the same directory, which is then synced,
// given mode perm and renamed over path. On any error the temporary file is
// removed and path is left untouched.
func WriteFileAtomic(path string, perm os.FileMode, write func(w io.Writer) error) (err error) {
	dir, base := filepath.Split(path)
	if dir == "" {
		dir = "."
	}
	tmp, err := os.CreateTemp(dir, "."+base+".tmp-*")
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			tmp.Close()
			os.Remove(tmp.Name())
		}
	}()
	bw := bufio.NewWriterSize(tmp, 1<<16)
	if err = write(bw); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err = errors.Join(bw.Flush(), tmp.Chmod(perm), tmp.Sync()); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err = tmp.Close(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err = os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}
