package elasticity

import (
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"os"

	"github.com/gocarina/gocsv"
)

// WriteTableCSV writes one table of a report as CSV with a header row
// (gocsv): numbers at full precision (empty when they do not apply) and
// text cells neutralised against formula injection (SafeCell).
func WriteTableCSV(w io.Writer, r *ReportData, name string) error {
	for _, t := range r.tables() {
		if t.Name == name {
			if err := gocsv.Marshal(t.Rows, w); err != nil {
				return fmt.Errorf("table %s: %w", name, err)
			}
			return nil
		}
	}
	return fmt.Errorf("no table %q in the report (tables: %v)", name, r.TableNames())
}

// WriteJSON writes every number of the report as indented JSON
// (results.json); values that do not apply are null.
func WriteJSON(w io.Writer, r *ReportData) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(r); err != nil {
		return fmt.Errorf("results.json: %w", err)
	}
	return nil
}

// Report file names.
const (
	ReportHTMLFile   = "report.html"
	ReportXLSXFile   = "tables.xlsx"
	ReportJSONFile   = "results.json"
	ReportRecordFile = "run_record.json"
)

// ReportFiles lists the files WriteReport writes into its folder.
func (r *ReportData) ReportFiles() []string {
	out := []string{ReportHTMLFile, ReportXLSXFile, ReportJSONFile, ReportRecordFile}
	for _, n := range r.TableNames() {
		out = append(out, n+".csv")
	}
	return out
}

// WriteReport writes the meeting pack into dir (created if missing):
// report.html, tables.xlsx, one CSV file per table, results.json and
// run_record.json. Everything is rendered in memory first, then written
// to temporary files in dir, which are renamed over the old files only
// once all of them are written: a failed run leaves the previous pack
// intact, and files in dir other than these are never touched. A dir that
// is a file is an error.
func WriteReport(dir string, r *ReportData) error {
	if st, err := os.Stat(dir); err == nil && !st.IsDir() {
		return fmt.Errorf("%s is a file, not a folder: give a folder for the report (it is created if missing)", dir)
	}
	r.Record.Outputs = r.ReportFiles()
	var files []NamedFile
	render := func(name string, write func(io.Writer) error) error {
		var b bytes.Buffer
		if err := write(&b); err != nil {
			return fmt.Errorf("%s: %w", name, err)
		}
		files = append(files, NamedFile{name, b.Bytes()})
		return nil
	}
	if err := render(ReportHTMLFile, func(w io.Writer) error { return WriteHTML(w, r) }); err != nil {
		return err
	}
	if err := render(ReportXLSXFile, func(w io.Writer) error { return WriteXLSX(w, r) }); err != nil {
		return err
	}
	if err := render(ReportJSONFile, func(w io.Writer) error { return WriteJSON(w, r) }); err != nil {
		return err
	}
	if err := render(ReportRecordFile, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(r.Record)
	}); err != nil {
		return err
	}
	for _, n := range r.TableNames() {
		if err := render(n+".csv", func(w io.Writer) error { return WriteTableCSV(w, r, n) }); err != nil {
			return err
		}
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("cannot create the report folder: %w", err)
	}
	return WriteFilesAtomic(dir, files)
}
