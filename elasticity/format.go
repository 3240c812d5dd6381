package elasticity

import (
	"encoding/json"
	"io"
)

// writers holds one table's writer for each format other than JSON.
type writers struct {
	text, csv, markdown func(io.Writer) error
}

// writeFormat writes a table in the named format: JSON encodes v with
// indentation, the other formats call their writer; an unknown format is
// an error naming the known ones.
func writeFormat(w io.Writer, format string, v any, ws writers) error {
	switch format {
	case "json":
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(v)
	case "csv":
		return ws.csv(w)
	case "markdown":
		return ws.markdown(w)
	case "text", "":
		return ws.text(w)
	}
	return CheckFormat(format)
}
