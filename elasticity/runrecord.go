package elasticity

import (
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"os"
	"runtime"
	"strconv"
	"strings"
	"time"
)

// RunRecord says how a report was made, so that it can be made again and
// checked: which inputs (by content hash), which spec, which program, which
// seeds, when and how long it took.
type RunRecord struct {
	// Program and Version name the program that made the report.
	Program string `json:"program"`
	Version string `json:"version"`
	// Command is the command line, as typed.
	Command string `json:"command,omitempty"`
	// Inputs are the files read, each with its SHA-256 and size.
	Inputs []InputFile `json:"inputs"`
	// Specs holds the specs as used (YAML), one per model the report fit.
	Specs []UsedSpec `json:"specs"`
	// Seed seeds the bootstrap; DataSeed the generated demo market (0
	// when the data came from a file).
	Seed     uint64 `json:"seed"`
	DataSeed uint64 `json:"data_seed,omitempty"`
	// Bootstrap is the number of bootstrap replicates asked for.
	Bootstrap int `json:"bootstrap"`
	// Started is the start time (UTC) and WallSeconds the time the run
	// took up to writing the outputs.
	Started     time.Time `json:"started"`
	WallSeconds float64   `json:"wall_seconds"`
	// GoVersion, Platform and CPUs describe the machine.
	GoVersion string `json:"go_version"`
	Platform  string `json:"platform"`
	CPUs      int    `json:"cpus"`
	// Outputs lists the files written.
	Outputs []string `json:"outputs"`
}

// InputFile identifies one input by content.
type InputFile struct {
	// Role says what the file is ("panel", "spec", "prices").
	Role string `json:"role"`
	// Path is the file as given; Generated notes input made in memory.
	Path   string `json:"path"`
	SHA256 string `json:"sha256"`
	Bytes  int64  `json:"bytes"`
}

// UsedSpec is the spec of one model as it was used.
type UsedSpec struct {
	Model string `json:"model"`
	YAML  string `json:"yaml"`
}

// NewRunRecord starts a record for the given program version at the
// current time.
func NewRunRecord(program, version string) RunRecord {
	return RunRecord{
		Program: program, Version: version, Started: time.Now().UTC().Truncate(time.Millisecond),
		GoVersion: runtime.Version(), Platform: runtime.GOOS + "/" + runtime.GOARCH, CPUs: runtime.NumCPU(),
		Inputs: []InputFile{}, Specs: []UsedSpec{}, Outputs: []string{},
	}
}

// Finish sets the wall time from the start time.
func (r *RunRecord) Finish() {
	r.WallSeconds = time.Since(r.Started).Seconds()
}

// HashFile returns the SHA-256 and size of a file.
func HashFile(role, path string) (InputFile, error) {
	f, err := os.Open(path)
	if err != nil {
		return InputFile{}, fmt.Errorf("run record: %w", err)
	}
	defer f.Close()
	h := sha256.New()
	n, err := io.Copy(h, f)
	if err != nil {
		return InputFile{}, fmt.Errorf("run record: reading %s: %w", path, err)
	}
	return InputFile{Role: role, Path: path, SHA256: hex.EncodeToString(h.Sum(nil)), Bytes: n}, nil
}

// HashWritten returns the SHA-256 and size of what write produces, for an
// input made in memory (the demo market, written as its CSV).
func HashWritten(role, name string, write func(io.Writer) error) (InputFile, error) {
	h := sha256.New()
	c := &countWriter{w: h}
	if err := write(c); err != nil {
		return InputFile{}, fmt.Errorf("run record: %w", err)
	}
	return InputFile{Role: role, Path: name, SHA256: hex.EncodeToString(h.Sum(nil)), Bytes: c.n}, nil
}

type countWriter struct {
	w io.Writer
	n int64
}

func (c *countWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.n += int64(n)
	return n, err
}

// Block reports whether the value is a block of text (a spec) to be
// shown as such.
func (r RecordRow) Block() bool { return strings.HasPrefix(string(r.Field), "spec ") }

// Rows returns the record as a two-column table (field, value).
func (r *RunRecord) Rows() []RecordRow {
	var out []RecordRow
	add := func(f, v string) { out = append(out, RecordRow{Field: Text(f), Value: Text(v)}) }
	add("program", r.Program+" "+r.Version)
	if r.Command != "" {
		add("command", r.Command)
	}
	add("started (UTC)", r.Started.Format(time.RFC3339Nano))
	add("wall time (s)", strconv.FormatFloat(r.WallSeconds, 'f', 3, 64))
	for _, in := range r.Inputs {
		add("input "+in.Role, fmt.Sprintf("%s (%d bytes, SHA-256 %s)", in.Path, in.Bytes, in.SHA256))
	}
	if r.DataSeed != 0 {
		add("data seed", strconv.FormatUint(r.DataSeed, 10))
	}
	add("bootstrap replicates", strconv.Itoa(r.Bootstrap))
	add("bootstrap seed", strconv.FormatUint(r.Seed, 10))
	for _, s := range r.Specs {
		add("spec "+s.Model, strings.TrimSpace(s.YAML))
	}
	add("go", r.GoVersion+" "+r.Platform+", "+strconv.Itoa(r.CPUs)+" cores")
	if len(r.Outputs) > 0 {
		add("outputs", strings.Join(r.Outputs, ", "))
	}
	return out
}
