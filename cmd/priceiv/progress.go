package main

import (
	"os"

	"github.com/schollz/progressbar/v3"
	"golang.org/x/term"
)

// progress returns a callback that draws a progress bar on standard error
// when standard error is a terminal (and nothing otherwise), and a
// function to call when the work is done.
func progress(total int, what string) (func(done int), func()) {
	if !term.IsTerminal(int(os.Stderr.Fd())) {
		return nil, func() {}
	}
	bar := progressbar.NewOptions(total,
		progressbar.OptionSetWriter(os.Stderr),
		progressbar.OptionSetDescription(what),
		progressbar.OptionShowCount(),
		progressbar.OptionThrottle(100_000_000),
		progressbar.OptionClearOnFinish(),
	)
	return func(done int) { _ = bar.Set(done) }, func() { _ = bar.Finish() }
}
