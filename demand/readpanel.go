package demand

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// ErrTooLarge marks a panel file whose columns cannot fit in the memory
// available.
var ErrTooLarge = errors.New("panel too large for memory")

// ReadPanelFile reads a panel file, choosing the reader by the extension:
// ".parquet" or ".pq" (any case) is read with ReadParquetFile, anything
// else as delimited text with ReadCSVFile. The file is only read.
func ReadPanelFile(path string, opts ReadOptions) (*Panel, error) {
	if IsParquetPath(path) {
		return ReadParquetFile(path, opts)
	}
	return ReadCSVFile(path, opts)
}

// IsParquetPath reports whether path names a Parquet file by its
// extension (".parquet" or ".pq", any case).
func IsParquetPath(path string) bool {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".parquet", ".pq":
		return true
	}
	return false
}

// MemoryError says that a panel file needs more memory than is available.
type MemoryError struct {
	File      string
	Size      int64 // bytes of the file
	Need      int64 // bytes the reader estimates it needs
	Available int64 // bytes of memory available
	What      string
}

func (e *MemoryError) Error() string {
	return fmt.Sprintf("%s: the file is %s and reading it needs about %s of memory (%s), but only %s is available; "+
		"keep only the rows and columns the model uses (for example one region or one year per file), "+
		"or run on a machine with more memory",
		e.File, byteSize(e.Size), byteSize(e.Need), e.What, byteSize(e.Available))
}

func (e *MemoryError) Unwrap() error { return ErrTooLarge }

// byteSize writes a byte count in B, KB, MB or GB (powers of 1000), with
// three significant digits.
func byteSize(b int64) string {
	x := float64(b)
	for _, u := range []string{"B", "KB", "MB", "GB"} {
		if x < 1000 || u == "GB" {
			switch {
			case u == "B":
				return strconv.FormatInt(b, 10) + " B"
			case x >= 1000:
				return strconv.FormatFloat(x, 'f', 0, 64) + " " + u
			}
			return strconv.FormatFloat(x, 'g', 3, 64) + " " + u
		}
		x /= 1000
	}
	panic("unreachable")
}

// memAvailable returns the bytes of memory this process may still use,
// and false when that cannot be told. It is a variable so that tests can
// pretend to have little memory.
var memAvailable = systemMemAvailable

// systemMemAvailable reads MemAvailable from /proc/meminfo and, when the
// process runs in a control group with a memory limit (cgroup v2), takes
// the smaller of that and the room left under the limit.
func systemMemAvailable() (int64, bool) {
	avail, ok := int64(0), false
	if b, err := os.ReadFile("/proc/meminfo"); err == nil {
		sc := bufio.NewScanner(bytes.NewReader(b))
		for sc.Scan() {
			f := strings.Fields(sc.Text())
			if len(f) >= 2 && f[0] == "MemAvailable:" {
				if kb, err := strconv.ParseInt(f[1], 10, 64); err == nil {
					avail, ok = kb*1024, true
				}
			}
		}
	}
	limit, err1 := os.ReadFile("/sys/fs/cgroup/memory.max")
	cur, err2 := os.ReadFile("/sys/fs/cgroup/memory.current")
	if err1 == nil && err2 == nil {
		l, e1 := strconv.ParseInt(strings.TrimSpace(string(limit)), 10, 64)
		c, e2 := strconv.ParseInt(strings.TrimSpace(string(cur)), 10, 64)
		if e1 == nil && e2 == nil && l > c {
			if !ok || l-c < avail {
				avail, ok = l-c, true
			}
		}
	}
	return avail, ok
}

// checkMemory returns a *MemoryError when need bytes are more than the
// memory available (nil when it cannot be told).
func checkMemory(source string, size, need int64, what string) error {
	avail, ok := memAvailable()
	if !ok || need <= avail {
		return nil
	}
	return &MemoryError{File: source, Size: size, Need: need, Available: avail, What: what}
}

// csvMemoryNeed estimates the bytes ReadCSVFile needs for a file of size
// bytes whose first bytes are head: the file itself, plus 8 bytes per
// record for its offset and 8 per cell of the final columns (a text
// column takes 4, so this errs high). The number of records is estimated
// from the lines in head.
func csvMemoryNeed(size int64, head []byte) int64 {
	lines := int64(bytes.Count(head, []byte{'\n'}))
	cols := int64(1)
	if i := bytes.IndexByte(head, '\n'); i >= 0 {
		// Delimiters in the header; any of the usual ones.
		h := head[:i]
		cols += int64(max(bytes.Count(h, []byte{','}), bytes.Count(h, []byte{';'}), bytes.Count(h, []byte{'\t'})))
	}
	rows := int64(1)
	if lines > 0 && len(head) > 0 {
		rows = size*lines/int64(len(head)) + 1
	}
	return size + rows*8*(cols+1)
}
