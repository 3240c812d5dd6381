package elasticity

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// WriteFileAtomic writes a file by calling write on a temporary file in the
// same folder and renaming it over path only when write succeeds, so a
// failed run leaves any previous file intact and never a half-written one.
func WriteFileAtomic(path string, write func(w io.Writer) error) error {
	dir := filepath.Dir(path)
	if st, err := os.Stat(path); err == nil && st.IsDir() {
		return fmt.Errorf("cannot write %s: it is a folder; give a file name", path)
	}
	f, err := os.CreateTemp(dir, "."+filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("cannot write %s: %w", path, err)
	}
	tmp := f.Name()
	ok := false
	defer func() {
		if !ok {
			f.Close()
			os.Remove(tmp)
		}
	}()
	bw := bufio.NewWriter(f)
	if err := write(bw); err != nil {
		return err
	}
	if err := bw.Flush(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Chmod(0o644); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	ok = true
	return nil
}

// NamedFile is the content of one output file, named relative to its
// folder.
type NamedFile struct {
	Name string
	Data []byte
}

// WriteFilesAtomic writes a set of files into dir: every file goes to a
// temporary file beside its target (written and synced), and only when all
// are written are they renamed over their targets, so a failure while
// writing leaves every previous file as it was. Other files in dir are
// never touched. A target that is a folder is an error.
func WriteFilesAtomic(dir string, files []NamedFile) error {
	tmps := make([]string, len(files))
	cleanup := func() {
		for _, t := range tmps {
			if t != "" {
				os.Remove(t)
			}
		}
	}
	for i, f := range files {
		target := filepath.Join(dir, f.Name)
		if st, err := os.Stat(target); err == nil && st.IsDir() {
			cleanup()
			return fmt.Errorf("cannot write %s: it is a folder", target)
		}
		tf, err := os.CreateTemp(dir, "."+f.Name+".tmp-*")
		if err != nil {
			cleanup()
			return fmt.Errorf("cannot write %s: %w", target, err)
		}
		tmps[i] = tf.Name()
		_, werr := tf.Write(f.Data)
		if werr == nil {
			werr = tf.Sync()
		}
		if werr == nil {
			werr = tf.Chmod(0o644)
		}
		if err := tf.Close(); werr == nil {
			werr = err
		}
		if werr != nil {
			cleanup()
			return fmt.Errorf("writing %s: %w", target, werr)
		}
	}
	for i, f := range files {
		if err := os.Rename(tmps[i], filepath.Join(dir, f.Name)); err != nil {
			cleanup()
			return fmt.Errorf("writing %s: %w", filepath.Join(dir, f.Name), err)
		}
		tmps[i] = ""
	}
	return nil
}
