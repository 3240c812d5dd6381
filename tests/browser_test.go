package tests

import (
	"bufio"
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"encoding/xml"
	"errors"
	"fmt"
	"image"
	"image/png"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"priceiv/demand"
	"priceiv/demo"
	"priceiv/elasticity"
)

// The browser check renders the demo report in Debian's headless Chromium
// (driven over the DevTools protocol through a pipe, so no port is
// opened), and checks what a reader would see: the page loads from the
// one file with no request failing, none leaving the file, and no console
// error; every picture is there as SVG and drawn at a readable size; the
// summary's numbers are those of results.json; a screenshot is not blank;
// and the page prints to PDF on a sensible number of A4 pages.

// chromiumArgs are the flags the check runs Chromium with.
var chromiumArgs = []string{
	"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
	"--disable-background-networking", "--disable-component-update", "--disable-sync",
	"--hide-scrollbars", "--remote-debugging-pipe",
}

// findChromium returns the Chromium binary (PRICEIV_CHROMIUM, else
// chromium on the PATH), or "" when there is none.
func findChromium() string {
	if p := os.Getenv("PRICEIV_CHROMIUM"); p != "" {
		if q, err := exec.LookPath(p); err == nil {
			return q
		}
		return ""
	}
	for _, name := range []string{"chromium", "chromium-browser", "/usr/bin/chromium"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	return ""
}

// demoReport runs the report of the demo market as priceiv report --demo
// does (the pooled, per-product and cross-price models the market is
// built to identify, its true unit costs and elasticities).
func demoReport(tb testing.TB) *elasticity.ReportData {
	tb.Helper()
	m, err := demo.Generate(demo.DefaultConfig())
	if err != nil {
		tb.Fatal(err)
	}
	model := func(dm demo.Model) demand.Spec {
		s := demand.Spec{Data: "demo", Quantity: dm.Quantity, Price: dm.Price, Form: dm.Form, Controls: dm.Controls,
			Shifters: dm.Shifters, Cluster: dm.Cluster, Product: demo.ColProduct, Unit: demo.ColStore, Time: demo.ColWeek}
		for _, fe := range dm.FixedEffects {
			s.FE = append(s.FE, strings.Join(fe, "*"))
		}
		return s
	}
	pooled := model(m.Truth.SuggestedModel)
	byProduct := pooled
	byProduct.By = demo.ColProduct
	byProduct.Shifters = []string{demo.ColIngredient}
	byProduct.Controls = []string{demo.ColTemperature, demo.ColPromo, demo.ColBean, demo.ColFreight, demo.ColBottle}
	byProduct.FE = []string{demo.ColStore}
	cross := model(m.Truth.CrossPriceModel)
	screen := pooled
	screen.Shifters = []string{demo.ColBean, demo.ColFreight, demo.ColBottle, demo.ColLabel, demo.ColTemperature}
	screen.Controls = []string{demo.ColPromo}
	in := elasticity.ReportInput{
		Screen: &screen,
		Title:  "Cold-brew line: price response and margins (demo market)", Panel: m.Panel,
		Pooled: &pooled, ByProduct: &byProduct, Cross: &cross, UnitCosts: map[string]float64{},
		CostSource: "the demo generator's true marginal cost", Bootstrap: 99, Seed: 1,
		Truth:  &elasticity.KnownTruth{Own: map[string]float64{}, Pooled: m.Truth.Pooled.OwnElasticity, PooledDefined: m.Truth.Pooled.Defined},
		Record: elasticity.NewRunRecord("priceiv", ""),
	}
	for _, p := range m.Truth.Products {
		in.UnitCosts[p.Name] = p.MeanMarginalCost
		in.Truth.Own[p.Name] = p.OwnElasticity
	}
	r, err := elasticity.RunReport(in)
	if err != nil {
		tb.Fatal(err)
	}
	r.Record.Finish()
	return r
}

// cdpMsg is a DevTools protocol message: a reply (ID set) or an event.
type cdpMsg struct {
	ID       int             `json:"id,omitempty"`
	Method   string          `json:"method,omitempty"`
	Params   json.RawMessage `json:"params,omitempty"`
	Result   json.RawMessage `json:"result,omitempty"`
	TargetID string          `json:"sessionId,omitempty"`
	Error    *struct {
		Code    int    `json:"code"`
		Message string `json:"message"`
	} `json:"error,omitempty"`
}

// browser is a minimal DevTools client over Chromium's pipe: requests
// written as NUL-terminated JSON to its fd 3, replies and events read
// from its fd 4.
type browser struct {
	cmd    *exec.Cmd
	w      io.WriteCloser
	stderr *bytes.Buffer

	mu      sync.Mutex
	next    int
	pending map[int]chan cdpMsg
	events  []cdpMsg
	changed chan struct{}
	dead    error
}

func startBrowser(t *testing.T, bin string) *browser {
	t.Helper()
	toChrome, chromeIn, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	chromeOut, fromChrome, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	args := append([]string{"--user-data-dir=" + t.TempDir()}, chromiumArgs...)
	cmd := exec.Command(bin, args...)
	cmd.ExtraFiles = []*os.File{toChrome, fromChrome} // fd 3: Chromium reads; fd 4: Chromium writes
	b := &browser{cmd: cmd, w: chromeIn, stderr: &bytes.Buffer{}, pending: map[int]chan cdpMsg{}, changed: make(chan struct{}, 1)}
	cmd.Stderr = b.stderr
	if err := cmd.Start(); err != nil {
		t.Fatalf("starting %s: %v", bin, err)
	}
	toChrome.Close()
	fromChrome.Close()
	go b.read(chromeOut)
	t.Cleanup(func() {
		b.w.Close()
		done := make(chan struct{})
		go func() { cmd.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(10 * time.Second):
			cmd.Process.Kill()
			<-done
		}
	})
	return b
}

func (b *browser) read(r io.Reader) {
	br := bufio.NewReaderSize(r, 1<<20)
	for {
		raw, err := br.ReadBytes(0)
		if err != nil {
			b.mu.Lock()
			b.dead = fmt.Errorf("the browser closed its pipe: %w", err)
			for _, ch := range b.pending {
				close(ch)
			}
			b.pending = map[int]chan cdpMsg{}
			b.mu.Unlock()
			b.notify()
			return
		}
		var m cdpMsg
		if err := json.Unmarshal(raw[:len(raw)-1], &m); err != nil {
			continue
		}
		b.mu.Lock()
		if m.ID != 0 {
			if ch, ok := b.pending[m.ID]; ok {
				ch <- m
				delete(b.pending, m.ID)
			}
		} else {
			b.events = append(b.events, m)
		}
		b.mu.Unlock()
		b.notify()
	}
}

func (b *browser) notify() {
	select {
	case b.changed <- struct{}{}:
	default:
	}
}

// call sends a command (to a page target when target is set) and waits
// for its reply.
func (b *browser) call(ctx context.Context, target, method string, params any, result any) error {
	b.mu.Lock()
	if b.dead != nil {
		b.mu.Unlock()
		return b.dead
	}
	b.next++
	id := b.next
	ch := make(chan cdpMsg, 1)
	b.pending[id] = ch
	b.mu.Unlock()
	if params == nil {
		params = struct{}{}
	}
	req, err := json.Marshal(map[string]any{"id": id, "method": method, "params": params, "sessionId": target})
	if err != nil {
		return err
	}
	if target == "" {
		req, _ = json.Marshal(map[string]any{"id": id, "method": method, "params": params})
	}
	if _, err := b.w.Write(append(req, 0)); err != nil {
		return fmt.Errorf("%s: %w", method, err)
	}
	select {
	case m, ok := <-ch:
		if !ok {
			return fmt.Errorf("%s: no reply: %v", method, b.dead)
		}
		if m.Error != nil {
			return fmt.Errorf("%s: %s (code %d)", method, m.Error.Message, m.Error.Code)
		}
		if result != nil {
			return json.Unmarshal(m.Result, result)
		}
		return nil
	case <-ctx.Done():
		return fmt.Errorf("%s: %w", method, ctx.Err())
	}
}

// waitEvent waits for an event of the page target.
func (b *browser) waitEvent(ctx context.Context, target, method string) error {
	for {
		b.mu.Lock()
		for _, e := range b.events {
			if e.Method == method && e.TargetID == target {
				b.mu.Unlock()
				return nil
			}
		}
		dead := b.dead
		b.mu.Unlock()
		if dead != nil {
			return dead
		}
		select {
		case <-b.changed:
		case <-ctx.Done():
			return fmt.Errorf("waiting for %s: %w", method, ctx.Err())
		}
	}
}

// problems lists the failed requests, requests that leave the report
// file, console errors and uncaught exceptions seen so far.
func (b *browser) problems(fileURL string) []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	var out []string
	for _, e := range b.events {
		switch e.Method {
		case "Network.loadingFailed":
			var p struct{ ErrorText, Type string }
			json.Unmarshal(e.Params, &p)
			out = append(out, fmt.Sprintf("failed request (%s): %s", p.Type, p.ErrorText))
		case "Network.requestWillBeSent":
			var p struct {
				Request struct{ URL string }
			}
			json.Unmarshal(e.Params, &p)
			if u := p.Request.URL; u != fileURL && !strings.HasPrefix(u, "data:") {
				out = append(out, "request outside the report file: "+u)
			}
		case "Runtime.exceptionThrown":
			out = append(out, "uncaught exception: "+string(e.Params))
		case "Runtime.consoleAPICalled":
			var p struct{ Type string }
			json.Unmarshal(e.Params, &p)
			if p.Type == "error" || p.Type == "assert" || p.Type == "warning" {
				out = append(out, "console "+p.Type+": "+string(e.Params))
			}
		case "Log.entryAdded":
			var p struct {
				Entry struct{ Level, Source, Text, URL string }
			}
			json.Unmarshal(e.Params, &p)
			if p.Entry.Level == "error" || p.Entry.Level == "warning" {
				out = append(out, fmt.Sprintf("console %s (%s): %s %s", p.Entry.Level, p.Entry.Source, p.Entry.Text, p.Entry.URL))
			}
		}
	}
	return out
}

func (b *browser) count(method string) int {
	b.mu.Lock()
	defer b.mu.Unlock()
	n := 0
	for _, e := range b.events {
		if e.Method == method {
			n++
		}
	}
	return n
}

// Viewport of the screenshot.
const shotW, shotH = 1024, 768

func TestReportInBrowser(t *testing.T) {
	bin := findChromium()
	if bin == "" {
		t.Skip("Chromium is not installed, so the report is not checked in a browser here (apt-get install chromium; .ci/run installs it, so CI runs this check)")
	}
	r := demoReport(t)
	dir := t.TempDir()
	if err := elasticity.WriteReport(dir, r); err != nil {
		t.Fatal(err)
	}
	page := filepath.Join(dir, elasticity.ReportHTMLFile)
	html, err := os.ReadFile(page)
	if err != nil {
		t.Fatal(err)
	}
	var results map[string]any
	js, err := os.ReadFile(filepath.Join(dir, elasticity.ReportJSONFile))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(js, &results); err != nil {
		t.Fatal(err)
	}

	// The pictures, parsed from the page source: each is well-formed SVG.
	figs, problems := r.Figures()
	if len(problems) > 0 {
		t.Errorf("pictures not drawn for the demo: %v", problems)
	}
	svgRe := regexp.MustCompile(`(?s)<svg class="plot" data-plot="([^"]+)".*?</svg>`)
	found := map[string]bool{}
	for _, m := range svgRe.FindAllSubmatch(html, -1) {
		found[string(m[1])] = true
		var doc struct{ XMLName xml.Name }
		if err := xml.Unmarshal(m[0], &doc); err != nil || doc.XMLName.Local != "svg" {
			t.Errorf("picture %s is not well-formed SVG: %v", m[1], err)
		}
	}
	for _, f := range figs {
		if !found[f.ID] {
			t.Errorf("picture %s is missing from report.html", f.ID)
		}
	}
	// Six pictures for the demo: elasticities, demand curves, contribution,
	// two first stages and the grouped picture (the report's plot list, with the
	// first stage drawn for the pooled and the per-product models).
	if len(found) != 6 {
		t.Errorf("report.html holds %d pictures, want 6: %v", len(found), found)
	}

	b := startBrowser(t, bin)
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	var target struct{ TargetID string }
	if err := b.call(ctx, "", "Target.createTarget", map[string]any{"url": "about:blank"}, &target); err != nil {
		t.Fatalf("%v\nChromium said:\n%s", err, b.stderr)
	}
	var att struct {
		TargetID string `json:"sessionId"`
	}
	if err := b.call(ctx, "", "Target.attachToTarget", map[string]any{"targetId": target.TargetID, "flatten": true}, &att); err != nil {
		t.Fatal(err)
	}
	s := att.TargetID
	for _, m := range []string{"Page.enable", "Runtime.enable", "Log.enable", "Network.enable"} {
		if err := b.call(ctx, s, m, nil, nil); err != nil {
			t.Fatal(err)
		}
	}
	if err := b.call(ctx, s, "Emulation.setDeviceMetricsOverride", map[string]any{"width": shotW, "height": shotH, "deviceScaleFactor": 1, "mobile": false}, nil); err != nil {
		t.Fatal(err)
	}
	fileURL := "file://" + page
	if err := b.call(ctx, s, "Page.navigate", map[string]any{"url": fileURL}, nil); err != nil {
		t.Fatal(err)
	}
	if err := b.waitEvent(ctx, s, "Page.loadEventFired"); err != nil {
		t.Fatal(err)
	}

	// What the page holds, from the browser's own parse of it.
	var ev struct {
		Result struct {
			Value string `json:"value"`
		} `json:"result"`
	}
	const probe = `JSON.stringify({
	  plots: Array.from(document.querySelectorAll('svg.plot')).map(s => { const b = s.getBoundingClientRect(); return {id: s.dataset.plot, w: b.width, h: b.height}; }),
	  nums: Array.from(document.querySelectorAll('#summary .num')).map(e => ({ptr: e.dataset.json, scale: e.dataset.scale || '', abs: e.dataset.abs || '', text: e.textContent})),
	  scripts: document.scripts.length, links: document.querySelectorAll('link[href], img[src], iframe, object, embed').length,
	  height: document.documentElement.scrollHeight
	})`
	if err := b.call(ctx, s, "Runtime.evaluate", map[string]any{"expression": probe, "returnByValue": true}, &ev); err != nil {
		t.Fatal(err)
	}
	var dom struct {
		Plots []struct {
			ID   string
			W, H float64
		}
		Nums []struct {
			Ptr, Scale, Abs, Text string
		}
		Scripts, Links int
		Height         float64
	}
	if err := json.Unmarshal([]byte(ev.Result.Value), &dom); err != nil {
		t.Fatalf("page probe: %v (%q)", err, ev.Result.Value)
	}
	if dom.Scripts != 0 || dom.Links != 0 {
		t.Errorf("the page has %d scripts and %d linked resources; it should have none", dom.Scripts, dom.Links)
	}
	if len(dom.Plots) != len(found) {
		t.Errorf("the browser sees %d pictures, the source holds %d", len(dom.Plots), len(found))
	}
	for _, p := range dom.Plots {
		// Drawn at a readable size: at least 400 px wide and 150 px high
		// in a 1024 px window (common practice for a figure in a report).
		if p.W < 400 || p.H < 150 {
			t.Errorf("picture %s is drawn at %.0f × %.0f px", p.ID, p.W, p.H)
		}
	}
	// The summary's numbers are results.json's, rounded as shown.
	if len(dom.Nums) < 30 {
		t.Errorf("the summary shows only %d tagged numbers", len(dom.Nums))
	}
	for _, n := range dom.Nums {
		checkShownNumber(t, results, n.Ptr, n.Scale, n.Abs != "", n.Text)
	}

	// Screenshot of the first screen.
	var shot struct{ Data string }
	if err := b.call(ctx, s, "Page.captureScreenshot", map[string]any{"format": "png"}, &shot); err != nil {
		t.Fatal(err)
	}
	pngBytes, err := base64.StdEncoding.DecodeString(shot.Data)
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(pngBytes))
	if err != nil {
		t.Fatal(err)
	}
	if bb := img.Bounds(); bb.Dx() != shotW || bb.Dy() != shotH {
		t.Errorf("screenshot is %d × %d, want %d × %d", bb.Dx(), bb.Dy(), shotW, shotH)
	}
	colours, inked := imageStats(img)
	// Non-blank: a page of text, cards and a dark header has hundreds of
	// distinct colours (anti-aliasing) and more than a tenth of its pixels
	// away from the background (threshold from looking at the page).
	if colours < 200 || inked < 0.10 {
		t.Errorf("screenshot looks blank: %d colours, %.1f%% inked", colours, 100*inked)
	}
	t.Logf("screenshot %d × %d: %d colours, %.1f%% inked, %d bytes; page %.0f px high", shotW, shotH, colours, 100*inked, len(pngBytes), dom.Height)
	if os.Getenv("PRICEIV_UPDATE_SCREENSHOT") != "" {
		if err := os.WriteFile(filepath.Join("testdata", "report-screenshot.png"), pngBytes, 0o644); err != nil {
			t.Fatal(err)
		}
	}

	// Printed to PDF on A4 with the page's own print styles.
	var pdf struct{ Data string }
	if err := b.call(ctx, s, "Page.printToPDF", map[string]any{"printBackground": true, "preferCSSPageSize": true}, &pdf); err != nil {
		t.Fatal(err)
	}
	pdfBytes, err := base64.StdEncoding.DecodeString(pdf.Data)
	if err != nil {
		t.Fatal(err)
	}
	pages := pdfPages(pdfBytes)
	// The demo pack: a summary of two pages, evidence of six to ten,
	// cautions and the record of one or two (measured: 13 pages).
	if pages < 5 || pages > 16 {
		t.Errorf("the PDF has %d pages, want 5 to 16", pages)
	}
	if !bytes.HasPrefix(pdfBytes, []byte("%PDF-")) {
		t.Errorf("printToPDF did not return a PDF")
	}
	t.Logf("PDF: %d pages, %d bytes", pages, len(pdfBytes))
	if d := os.Getenv("PRICEIV_KEEP_RENDER"); d != "" {
		os.WriteFile(filepath.Join(d, "report.pdf"), pdfBytes, 0o644)
		os.WriteFile(filepath.Join(d, "report.png"), pngBytes, 0o644)
	}

	if p := b.problems(fileURL); len(p) > 0 {
		t.Errorf("the page did not load cleanly:\n%s", strings.Join(p, "\n"))
	}
	if n := b.count("Network.requestWillBeSent"); n != 1 {
		t.Errorf("the page made %d requests; it should make one (itself)", n)
	}
	_ = b.call(ctx, "", "Browser.close", nil, nil)
}

// imageStats returns the number of distinct colours of an image and the
// share of its pixels that differ clearly from its most common colour.
func imageStats(img image.Image) (colours int, inked float64) {
	seen := map[uint32]int{}
	bb := img.Bounds()
	for y := bb.Min.Y; y < bb.Max.Y; y++ {
		for x := bb.Min.X; x < bb.Max.X; x++ {
			r, g, b, _ := img.At(x, y).RGBA()
			seen[(r>>8)<<16|(g>>8)<<8|b>>8]++
		}
	}
	var bg uint32
	for c, n := range seen {
		if n > seen[bg] {
			bg = c
		}
	}
	far := 0
	br, bgc, bb2 := int(bg>>16), int(bg>>8&0xff), int(bg&0xff)
	for c, n := range seen {
		d := abs(int(c>>16)-br) + abs(int(c>>8&0xff)-bgc) + abs(int(c&0xff)-bb2)
		if d > 48 {
			far += n
		}
	}
	return len(seen), float64(far) / float64(bb.Dx()*bb.Dy())
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// pdfPages counts the page objects of a PDF ("/Type /Page", not
// "/Pages").
func pdfPages(b []byte) int {
	return len(regexp.MustCompile(`/Type\s*/Page[^s]`).FindAll(b, -1))
}

// checkShownNumber checks that a number shown on the page is the value at
// the JSON pointer in results.json, times scale, unsigned when abs,
// rounded to the decimals shown.
func checkShownNumber(t *testing.T, results map[string]any, ptr, scale string, absolute bool, text string) {
	t.Helper()
	v, err := jsonPointer(results, ptr)
	if err != nil {
		t.Errorf("%s: %v", ptr, err)
		return
	}
	want, ok := v.(float64)
	if !ok {
		t.Errorf("%s is %v in results.json, not a number", ptr, v)
		return
	}
	if absolute && want < 0 {
		want = -want
	}
	if scale != "" {
		f, err := strconv.ParseFloat(scale, 64)
		if err != nil {
			t.Errorf("%s: bad data-scale %q", ptr, scale)
			return
		}
		want *= f
	}
	shown, decimals, err := parseShown(text)
	if err != nil {
		t.Errorf("%s: %v", ptr, err)
		return
	}
	// Rounded to the decimals shown: within half a unit of the last digit.
	tol := 0.5*pow10(-decimals) + 1e-9*max(1, want)
	if d := shown - want; d > tol || d < -tol {
		t.Errorf("%s: the page shows %q, results.json holds %v", ptr, text, want)
	}
}

// parseShown reads a number as the report shows it: a typographic minus,
// thousands separators and a percent sign.
func parseShown(text string) (float64, int, error) {
	s := strings.TrimSpace(text)
	s = strings.ReplaceAll(s, "−", "-")
	s = strings.ReplaceAll(s, ",", "")
	s = strings.TrimSuffix(s, "%")
	s = strings.TrimPrefix(s, "+")
	x, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, 0, fmt.Errorf("cannot read %q as a number", text)
	}
	d := 0
	if i := strings.IndexByte(s, '.'); i >= 0 {
		d = len(s) - i - 1
	}
	return x, d, nil
}

func pow10(n int) float64 {
	x := 1.0
	for ; n < 0; n++ {
		x /= 10
	}
	for ; n > 0; n-- {
		x *= 10
	}
	return x
}

// jsonPointer resolves an RFC 6901 pointer in decoded JSON.
func jsonPointer(doc any, ptr string) (any, error) {
	if !strings.HasPrefix(ptr, "/") {
		return nil, fmt.Errorf("bad pointer %q", ptr)
	}
	cur := doc
	for _, part := range strings.Split(ptr[1:], "/") {
		part = strings.ReplaceAll(strings.ReplaceAll(part, "~1", "/"), "~0", "~")
		switch c := cur.(type) {
		case map[string]any:
			v, ok := c[part]
			if !ok {
				return nil, fmt.Errorf("no key %q", part)
			}
			cur = v
		case []any:
			i, err := strconv.Atoi(part)
			if err != nil || i < 0 || i >= len(c) {
				return nil, fmt.Errorf("no index %q", part)
			}
			cur = c[i]
		default:
			return nil, errors.New("pointer runs past a value")
		}
	}
	return cur, nil
}
