package demand

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"reflect"
	"regexp"
	"strings"

	"go.yaml.in/yaml/v3"
)

// Spec states one run: where the panel comes from, how to prepare it and
// which model to fit. It is read from a YAML file (--spec) and overridden
// field by field by command-line flags, so a run can be repeated exactly.
//
// A model is stated in one of two ways. Demand form: Quantity and Price
// with Shifters as instruments and Controls as exogenous regressors; Form
// says how quantity and price enter. General form: Outcome, Endogenous,
// Exogenous and Instruments, all as given (no transformation).
type Spec struct {
	// Data is the panel file (CSV).
	Data string `yaml:"data,omitempty" json:"data,omitempty"`
	// Delimiter is the field separator: "," (default), ";" or "tab".
	Delimiter string `yaml:"delimiter,omitempty" json:"delimiter,omitempty"`
	// Derive lists derived columns, each "name=EXPR", computed in order.
	Derive List `yaml:"derive,omitempty" json:"derive,omitempty"`
	// Where keeps the rows where the expression holds (after Derive).
	Where string `yaml:"where,omitempty" json:"where,omitempty"`
	// Unit and Time name the panel keys for lag and diff.
	Unit string `yaml:"unit,omitempty" json:"unit,omitempty"`
	Time string `yaml:"time,omitempty" json:"time,omitempty"`

	// Demand form.
	Quantity string `yaml:"quantity,omitempty" json:"quantity,omitempty"`
	Price    string `yaml:"price,omitempty" json:"price,omitempty"`
	Shifters List   `yaml:"shifters,omitempty" json:"shifters,omitempty"`
	Controls List   `yaml:"controls,omitempty" json:"controls,omitempty"`
	// Form is log-log (default), semi-log or linear.
	Form string `yaml:"form,omitempty" json:"form,omitempty"`
	// Product names the product column (per-product and cross-price
	// designs, and labels).
	Product string `yaml:"product,omitempty" json:"product,omitempty"`

	// By names a column (usually the product) to fit one regression per
	// level of; Interact names a column to interact price and shifters
	// with in one pooled regression; Cross asks for the cross-price
	// elasticity matrix among the products (matched on Unit and Time).
	// At most one of the three may be set.
	By       string `yaml:"by,omitempty" json:"by,omitempty"`
	Interact string `yaml:"interact,omitempty" json:"interact,omitempty"`
	Cross    bool   `yaml:"cross,omitempty" json:"cross,omitempty"`

	// General form.
	Outcome     string `yaml:"outcome,omitempty" json:"outcome,omitempty"`
	Endogenous  List   `yaml:"endogenous,omitempty" json:"endogenous,omitempty"`
	Exogenous   List   `yaml:"exogenous,omitempty" json:"exogenous,omitempty"`
	Instruments List   `yaml:"instruments,omitempty" json:"instruments,omitempty"`

	// ExpectSign declares shifters that lower price, as "name=-" (a cost
	// shifter is expected to raise it; "name=+" restates the default and
	// "name=?" drops the check).
	ExpectSign List `yaml:"expect_sign,omitempty" json:"expect_sign,omitempty"`

	// FE lists the fixed effects to absorb (id columns).
	FE List `yaml:"fe,omitempty" json:"fe,omitempty"`
	// Cluster lists one or two cluster columns.
	Cluster List `yaml:"cluster,omitempty" json:"cluster,omitempty"`
	// Vcov is iid, hc1 or cluster (default: cluster when Cluster is set,
	// else hc1).
	Vcov string `yaml:"vcov,omitempty" json:"vcov,omitempty"`
	// Estimator is ols, 2sls (default), liml or fuller.
	Estimator string `yaml:"estimator,omitempty" json:"estimator,omitempty"`
	// Level is the confidence level of bands (default 0.95).
	Level float64 `yaml:"level,omitempty" json:"level,omitempty"`
	// MaxSweeps and Tolerance control fixed-effect absorption.
	MaxSweeps int     `yaml:"max_sweeps,omitempty" json:"max_sweeps,omitempty"`
	Tolerance float64 `yaml:"tolerance,omitempty" json:"tolerance,omitempty"`

	// The data in a database (priceiv estimate and sql): DB is a
	// PostgreSQL URL, best without a password (PGPASSWORD or ~/.pgpass
	// supply it; it is never written out), Table or Query the panel in
	// it. Moments names a moments file to estimate from instead, read
	// relative to the spec file.
	DB      string `yaml:"db,omitempty" json:"-"`
	Table   string `yaml:"table,omitempty" json:"table,omitempty"`
	Query   string `yaml:"query,omitempty" json:"query,omitempty"`
	Moments string `yaml:"moments,omitempty" json:"moments,omitempty"`

	// Report options, used by priceiv report (the meeting pack) and
	// ignored by the other commands. Title heads the report. Prices names
	// a CSV of current prices per product (product, price, and optionally
	// unit_cost, quantity, owner), read relative to the spec file.
	// WhatIfs lists the price moves to simulate, one scenario per entry:
	// "PRODUCT=+5%", "PRODUCT=-3%" or "PRODUCT=4.20", several moves of one
	// scenario joined by "; ". Bootstrap is the number of cluster
	// bootstrap replicates of the cross-price matrix (0: none; bands then
	// come from the delta method), drawn from Seed.
	Title     string `yaml:"title,omitempty" json:"title,omitempty"`
	Prices    string `yaml:"prices,omitempty" json:"prices,omitempty"`
	WhatIfs   List   `yaml:"whatifs,omitempty" json:"whatifs,omitempty"`
	Bootstrap int    `yaml:"bootstrap,omitempty" json:"bootstrap,omitempty"`
	Seed      uint64 `yaml:"seed,omitempty" json:"seed,omitempty"`
}

// List is a list of names in a spec file. It reads a YAML sequence
// ([bean_index, freight_index]) or a single scalar, which is split at
// commas as the command-line flags are ("bean_index, freight_index").
type List []string

// UnmarshalYAML reads a sequence or a comma-separated scalar.
func (l *List) UnmarshalYAML(n *yaml.Node) error {
	switch n.Kind {
	case yaml.ScalarNode:
		*l = nil
		for _, part := range strings.Split(n.Value, ",") {
			if p := strings.TrimSpace(part); p != "" {
				*l = append(*l, p)
			}
		}
		return nil
	case yaml.SequenceNode:
		out := make(List, 0, len(n.Content))
		for _, c := range n.Content {
			if c.Kind != yaml.ScalarNode {
				return &SpecError{Line: n.Line, Msg: "a list here holds names, one per item, for example [bean_index, freight_index]"}
			}
			out = append(out, c.Value)
		}
		*l = out
		return nil
	}
	return &SpecError{Line: n.Line, Msg: "expected a list of names, for example [bean_index, freight_index]"}
}

// ErrSpec marks a problem with a spec file or its fields.
var ErrSpec = errors.New("bad spec")

// SpecError reports a problem in a spec file at a line.
type SpecError struct {
	File string
	Line int
	Msg  string
}

func (e *SpecError) Error() string {
	if e.Line > 0 {
		return fmt.Sprintf("%s: line %d: %s", e.File, e.Line, e.Msg)
	}
	return fmt.Sprintf("%s: %s", e.File, e.Msg)
}

func (e *SpecError) Unwrap() error { return ErrSpec }

// SpecKeys lists the keys a spec file may hold.
func SpecKeys() []string {
	t := reflect.TypeOf(Spec{})
	var keys []string
	for i := 0; i < t.NumField(); i++ {
		k := strings.Split(t.Field(i).Tag.Get("yaml"), ",")[0]
		keys = append(keys, k)
	}
	return keys
}

var unknownField = regexp.MustCompile(`line (\d+): field (\S+) not found`)

// ReadSpec reads a YAML spec file. Unknown keys are errors naming the key,
// its line and the closest known key. Relative data paths are taken
// relative to the spec file's folder.
func ReadSpec(path string) (*Spec, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return ParseSpec(b, path)
}

// ParseSpec parses spec YAML; name is used in messages.
func ParseSpec(b []byte, name string) (*Spec, error) {
	var s Spec
	dec := yaml.NewDecoder(bytes.NewReader(b))
	dec.KnownFields(true)
	if err := dec.Decode(&s); err != nil {
		if err.Error() == "EOF" {
			return &s, nil
		}
		if m := unknownField.FindStringSubmatch(err.Error()); m != nil {
			var line int
			fmt.Sscan(m[1], &line)
			msg := fmt.Sprintf("unknown key %q", m[2])
			if c := closeNames(m[2], SpecKeys(), 1); len(c) > 0 {
				msg += fmt.Sprintf("; did you mean %q?", c[0])
			}
			msg += " (known keys: " + strings.Join(SpecKeys(), ", ") + ")"
			return nil, &SpecError{File: name, Line: line, Msg: msg}
		}
		var se *SpecError
		if errors.As(err, &se) {
			se.File = name
			return nil, se
		}
		return nil, &SpecError{File: name, Msg: friendlyYAML(err.Error())}
	}
	return &s, nil
}

var yamlType = regexp.MustCompile(`line (\d+): cannot unmarshal !!(\w+) ` + "`" + `([^` + "`" + `]*)` + "`" + ` into (\S+)`)

// friendlyYAML rewrites the YAML decoder's type errors in words.
func friendlyYAML(msg string) string {
	msg = strings.TrimPrefix(msg, "yaml: ")
	msg = strings.TrimPrefix(msg, "unmarshal errors:\n  ")
	if m := yamlType.FindStringSubmatch(msg); m != nil {
		want := map[string]string{"float64": "a number (for example 0.95)", "int": "a whole number", "uint64": "a whole number", "bool": "true or false", "string": "a single name or text"}[m[4]]
		if want == "" {
			want = "a different kind of value"
		}
		return fmt.Sprintf("line %s: found %q where the key expects %s", m[1], m[3], want)
	}
	return msg
}

// Marshal returns the spec as YAML (for the run record), with any
// password taken out of DB.
func (s *Spec) Marshal() []byte {
	c := *s
	c.DB = RedactURL(c.DB)
	b, _ := yaml.Marshal(&c)
	return b
}

// DemandForm reports whether the spec states a demand model (quantity and
// price) rather than a general one.
func (s *Spec) DemandForm() bool { return s.Quantity != "" || s.Price != "" }

// Check validates the combination of fields (not the data).
func (s *Spec) Check() error {
	general := s.Outcome != "" || len(s.Endogenous) > 0 || len(s.Exogenous) > 0 || len(s.Instruments) > 0
	switch {
	case s.DemandForm() && general:
		return fmt.Errorf("%w: state the model either in demand form (quantity, price, shifters, controls) or in general form (outcome, endogenous, exogenous, instruments), not both", ErrSpec)
	case s.DemandForm():
		if s.Quantity == "" || s.Price == "" {
			return fmt.Errorf("%w: the demand form needs both a quantity column (--quantity) and a price column (--price)", ErrSpec)
		}
	case general:
		if s.Outcome == "" {
			return fmt.Errorf("%w: the general form needs an outcome column (--outcome)", ErrSpec)
		}
	default:
		return fmt.Errorf("%w: no model stated: give --quantity and --price (demand form) or --outcome with --endogenous and --instruments (general form)", ErrSpec)
	}
	switch s.Form {
	case "", "log-log", "semi-log", "linear":
	default:
		return fmt.Errorf("%w: unknown form %q: choose log-log, semi-log or linear", ErrSpec, s.Form)
	}
	n := 0
	for _, set := range []bool{s.By != "", s.Interact != "", s.Cross} {
		if set {
			n++
		}
	}
	if n > 1 {
		return fmt.Errorf("%w: by, interact and cross are different designs: choose one", ErrSpec)
	}
	if (s.By != "" || s.Interact != "" || s.Cross) && !s.DemandForm() {
		return fmt.Errorf("%w: by, interact and cross need the demand form (--quantity, --price, --shifters)", ErrSpec)
	}
	if len(s.Cluster) > 2 {
		return fmt.Errorf("%w: at most two cluster columns (two-way clustering); got %d", ErrSpec, len(s.Cluster))
	}
	if s.Level != 0 && !(s.Level > 0.5 && s.Level < 1) {
		return fmt.Errorf("%w: level %v outside (0.5, 1): give for example 0.95", ErrSpec, s.Level)
	}
	return nil
}

// ExpectedSigns parses ExpectSign into a map from shifter to +1, -1 or 0.
func (s *Spec) ExpectedSigns() (map[string]int, error) {
	out := map[string]int{}
	for _, e := range s.ExpectSign {
		name, sign, ok := strings.Cut(e, "=")
		name = strings.TrimSpace(name)
		if !ok || name == "" {
			return nil, fmt.Errorf("%w: --expect-sign %q: write name=- for a shifter that lowers price (or name=+, name=?)", ErrSpec, e)
		}
		switch strings.TrimSpace(sign) {
		case "+":
			out[name] = 1
		case "-":
			out[name] = -1
		case "?", "0":
			out[name] = 0
		default:
			return nil, fmt.Errorf("%w: --expect-sign %q: the sign must be +, - or ?", ErrSpec, e)
		}
	}
	return out, nil
}

// DelimiterByte returns the delimiter as a byte.
func (s *Spec) DelimiterByte() (byte, error) {
	switch s.Delimiter {
	case "", ",":
		return ',', nil
	case ";":
		return ';', nil
	case "tab", "\t", `\t`:
		return '\t', nil
	case "|":
		return '|', nil
	}
	return 0, fmt.Errorf("%w: delimiter %q: use \",\", \";\", \"|\" or \"tab\"", ErrSpec, s.Delimiter)
}
