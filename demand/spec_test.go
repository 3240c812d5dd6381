package demand

import (
	"errors"
	"strings"
	"testing"
)

// TestParseSpec checks list keys given as sequences or comma-separated
// scalars, and that type mistakes and unknown keys are named with their
// line and a fix.
func TestParseSpec(t *testing.T) {
	for i, test := range []struct {
		yaml string
		want []string // shifters, when no error
		err  []string // parts of the error
	}{
		{"quantity: units\nprice: price\nshifters: [bean_index, freight_index]\n", []string{"bean_index", "freight_index"}, nil},
		{"quantity: units\nprice: price\nshifters: bean_index, freight_index\n", []string{"bean_index", "freight_index"}, nil},
		{"quantity: units\nprice: price\nshifters: bean_index\n", []string{"bean_index"}, nil},
		{"quantity: units\nlevel: high\n", nil, []string{"line 2", `"high"`, "a number"}},
		{"quantity: units\nshifters:\n  a: b\n", nil, []string{"line 3", "list of names"}},
		{"quantity: units\nshifter: [a]\n", nil, []string{"line 2", `"shifter"`, `did you mean "shifters"`}},
	} {
		s, err := ParseSpec([]byte(test.yaml), "model.yaml")
		if test.err == nil {
			if err != nil {
				t.Errorf("%d: %v", i, err)
				continue
			}
			if strings.Join(s.Shifters, "|") != strings.Join(test.want, "|") {
				t.Errorf("%d: shifters %q, want %q", i, s.Shifters, test.want)
			}
			continue
		}
		if err == nil || !errors.Is(err, ErrSpec) {
			t.Errorf("%d: error %v, want a spec error", i, err)
			continue
		}
		for _, w := range test.err {
			if !strings.Contains(err.Error(), w) {
				t.Errorf("%d: error %q lacks %q", i, err, w)
			}
		}
	}
}
