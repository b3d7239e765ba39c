package htmlreport

import (
	"bufio"
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"image"
	"image/png"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/heft-project/heft/aggregate"
)

var updateScreenshot = flag.Bool("update-screenshot", false, "rewrite ../../testdata/report.png from the browser test's screenshot")

// chromiumPath finds Debian's chromium. Without it the test is skipped
// locally and fails in CI (CI set), where .ci/run installs it.
func chromiumPath(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	if os.Getenv("CI") != "" {
		t.Fatal("CI is set but chromium is not installed (apt-get install -y chromium)")
	}
	t.Skip("chromium not installed; set CI=true to make this a failure")
	return ""
}

// TestBrowser opens the rendered fixture in headless Chromium, driven over
// the DevTools protocol on --remote-debugging-pipe, and checks what a
// reader would see: the page loads without console errors, every chart's
// SVG is present and drawn, the effects table shows the report JSON's
// numbers, and a full-page screenshot has ink in every chart's region.
func TestBrowser(t *testing.T) {
	bin := chromiumPath(t)
	dir := t.TempDir()
	r := loadFixture(t)
	page := filepath.Join(dir, "report.html")
	if err := os.WriteFile(page, []byte(render(t, r, demoOptions)), 0o644); err != nil {
		t.Fatal(err)
	}

	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	b, err := startBrowser(ctx, bin, filepath.Join(dir, "profile"))
	if err != nil {
		t.Fatal(err)
	}
	defer b.close()

	const width = 1280
	if _, err := b.call(ctx, "Emulation.setDeviceMetricsOverride", map[string]any{"width": width, "height": 800, "deviceScaleFactor": 1, "mobile": false}); err != nil {
		t.Fatal(err)
	}
	if err := b.navigate(ctx, "file://"+page); err != nil {
		t.Fatal(err)
	}

	for _, m := range b.consoleErrors() {
		t.Errorf("console: %s", m)
	}

	var dom struct {
		Height int
		Charts map[string]struct {
			Drawn               int
			X, Y, Width, Height float64
		}
		Effects []struct {
			Estimand, Estimator string
			Cells               []string
		}
	}
	if err := b.eval(ctx, domProbe, &dom); err != nil {
		t.Fatal(err)
	}

	names := []string{"balance", "overlap", "weights", "drift"}
	for _, name := range names {
		c, ok := dom.Charts[name]
		switch {
		case !ok:
			t.Errorf("chart %s: no <svg id=chart-%s> in the loaded page", name, name)
		case c.Drawn < 20:
			t.Errorf("chart %s: %d drawn elements; want a drawn chart", name, c.Drawn)
		case c.Width < 600 || c.Height < 100:
			t.Errorf("chart %s: laid out %.0f×%.0f px at a %d px window; want it readable", name, c.Width, c.Height, width)
		}
	}

	checkEffects(t, r, dom.Effects)

	shot, err := b.screenshot(ctx, width, dom.Height)
	if err != nil {
		t.Fatal(err)
	}
	img, err := png.Decode(bytes.NewReader(shot))
	if err != nil {
		t.Fatalf("screenshot: %v", err)
	}
	if got := img.Bounds().Dy(); got < dom.Height-1 {
		t.Errorf("screenshot is %d px high, the page %d", got, dom.Height)
	}
	for _, name := range names {
		c := dom.Charts[name]
		rect := image.Rect(int(c.X), int(c.Y), int(c.X+c.Width), int(c.Y+c.Height))
		if ink := inkShare(img, rect); ink < 0.01 {
			t.Errorf("chart %s: %.2f%% of its %v region is not white; want a visible chart", name, 100*ink, rect)
		}
	}
	// The console check must be able to fail: a page with a console error
	// and a missing file has to be caught by the same detector.
	before := len(b.consoleErrors())
	bad := filepath.Join(dir, "bad.html")
	if err := os.WriteFile(bad, []byte(`<!DOCTYPE html><title>x</title><script>console.error("probe")</script><img src="missing.png">`), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := b.navigate(ctx, "file://"+bad); err != nil {
		t.Fatal(err)
	}
	t.Logf("bad page: %q", b.consoleErrors()[before:])
	if n := len(b.consoleErrors()) - before; n < 2 {
		t.Errorf("a page with a console error and a missing image gave %d console errors; the detector is blind", n)
	}

	if *updateScreenshot {
		out := filepath.Join("..", "..", "testdata", "report.png")
		if err := os.WriteFile(out, shot, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("wrote %s (%d bytes)", out, len(shot))
	}
}

// domProbe runs in the loaded page (the page has no scripts of its own)
// and returns the page height, each chart's box and drawn element count,
// and the effects table's cells.
const domProbe = `(() => {
  const out = {Height: Math.ceil(document.documentElement.scrollHeight), Charts: {}, Effects: []};
  for (const svg of document.querySelectorAll('svg[id^="chart-"]')) {
    const r = svg.getBoundingClientRect();
    out.Charts[svg.id.slice(6)] = {Drawn: svg.querySelectorAll('path, text').length,
      X: r.left + window.scrollX, Y: r.top + window.scrollY, Width: r.width, Height: r.height};
  }
  for (const tr of document.querySelectorAll('#effects-table tbody tr')) {
    out.Effects.push({Estimand: tr.dataset.estimand, Estimator: tr.dataset.estimator,
      Cells: Array.from(tr.cells).map(td => td.textContent.trim())});
  }
  return out;
})()`

// checkEffects compares the table as the browser shows it with the report:
// one row per estimate, each number equal to the JSON's to the digits shown.
func checkEffects(t *testing.T, r *aggregate.Report, rows []struct {
	Estimand, Estimator string
	Cells               []string
}) {
	t.Helper()
	want := 0
	for _, byEst := range r.Estimates {
		want += len(byEst)
	}
	if len(rows) != want {
		t.Errorf("effects table shows %d rows, the report has %d estimates", len(rows), want)
	}
	for _, row := range rows {
		e, ok := r.Estimates[row.Estimand][row.Estimator]
		if !ok {
			t.Errorf("effects table row %s/%s is not in the report", row.Estimand, row.Estimator)
			continue
		}
		if len(row.Cells) < 7 {
			t.Errorf("effects row %s/%s has %d cells", row.Estimand, row.Estimator, len(row.Cells))
			continue
		}
		for i, v := range []aggregate.Float{e.Estimate, e.SE, e.SEWithModelUncertainty, e.CILow, e.CIHigh} {
			shown := row.Cells[2+i]
			if err := sameNumber(shown, float64(v)); err != nil {
				t.Errorf("effects %s/%s column %d: %v", row.Estimand, row.Estimator, 3+i, err)
			}
		}
	}
}

// sameNumber checks that shown is v rounded to the digits shown ("–" for
// an undefined v).
func sameNumber(shown string, v float64) error {
	if shown == "–" {
		if finite(v) {
			return fmt.Errorf("shows – for %v", v)
		}
		return nil
	}
	s := strings.ReplaceAll(strings.ReplaceAll(shown, "−", "-"), ",", "")
	x, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return fmt.Errorf("shows %q, not a number", shown)
	}
	tol := math.Abs(v) * 5e-4 // exponent form: four significant digits
	if !strings.ContainsAny(s, "eE") {
		dec := 0
		if i := strings.IndexByte(s, '.'); i >= 0 {
			dec = len(s) - i - 1
		}
		tol = 0.5 * math.Pow(10, -float64(dec))
	}
	if !(math.Abs(x-v) <= tol*(1+1e-9)) {
		return fmt.Errorf("shows %s, the report %v", shown, v)
	}
	return nil
}

// inkShare is the share of pixels in rect that are not near white.
func inkShare(img image.Image, rect image.Rectangle) float64 {
	rect = rect.Intersect(img.Bounds())
	if rect.Empty() {
		return 0
	}
	ink := 0
	for y := rect.Min.Y; y < rect.Max.Y; y++ {
		for x := rect.Min.X; x < rect.Max.X; x++ {
			r, g, b, _ := img.At(x, y).RGBA()
			if r < 0xF000 || g < 0xF000 || b < 0xF000 {
				ink++
			}
		}
	}
	return float64(ink) / float64(rect.Dx()*rect.Dy())
}

// browser is a headless Chromium spoken to over the DevTools protocol on
// file descriptors 3 (commands in) and 4 (replies and events out), each
// message JSON ended by a NUL byte.
type browser struct {
	cmd     *exec.Cmd
	in      *os.File
	session string

	mu      sync.Mutex
	nextID  int
	waiting map[int]chan reply
	console []string
	loaded  chan struct{}
	done    chan struct{} // closed when the reader stops
}

type reply struct {
	Result json.RawMessage `json:"result"`
	Error  *struct {
		Message string `json:"message"`
	} `json:"error"`
}

type message struct {
	ID        int             `json:"id"`
	Method    string          `json:"method"`
	Params    json.RawMessage `json:"params"`
	SessionID string          `json:"sessionId"`
	reply
}

func startBrowser(ctx context.Context, bin, profile string) (*browser, error) {
	cmdR, cmdW, err := os.Pipe()
	if err != nil {
		return nil, err
	}
	outR, outW, err := os.Pipe()
	if err != nil {
		return nil, err
	}
	cmd := exec.Command(bin, "--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
		"--disable-background-networking", "--disable-component-update", "--disable-sync", "--disable-extensions",
		"--no-first-run", "--no-default-browser-check", "--hide-scrollbars", "--mute-audio",
		"--user-data-dir="+profile, "--remote-debugging-pipe", "about:blank")
	cmd.ExtraFiles = []*os.File{cmdR, outW} // fd 3 and fd 4 in the child
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		return nil, fmt.Errorf("start %s: %w", bin, err)
	}
	cmdR.Close()
	outW.Close()
	b := &browser{cmd: cmd, in: cmdW, waiting: map[int]chan reply{}, loaded: make(chan struct{}, 1), done: make(chan struct{})}
	go b.read(outR)

	res, err := b.callIn(ctx, "", "Target.createTarget", map[string]any{"url": "about:blank"})
	if err != nil {
		b.close()
		return nil, fmt.Errorf("chromium: %w (stderr: %s)", err, lastLines(stderr.String(), 5))
	}
	var target struct{ TargetID string }
	if err := json.Unmarshal(res, &target); err != nil {
		b.close()
		return nil, err
	}
	res, err = b.callIn(ctx, "", "Target.attachToTarget", map[string]any{"targetId": target.TargetID, "flatten": true})
	if err != nil {
		b.close()
		return nil, err
	}
	var att struct{ SessionID string }
	if err := json.Unmarshal(res, &att); err != nil {
		b.close()
		return nil, err
	}
	b.session = att.SessionID
	for _, m := range []string{"Page.enable", "Runtime.enable", "Log.enable"} {
		if _, err := b.call(ctx, m, nil); err != nil {
			b.close()
			return nil, err
		}
	}
	return b, nil
}

func lastLines(s string, n int) string {
	l := strings.Split(strings.TrimSpace(s), "\n")
	if len(l) > n {
		l = l[len(l)-n:]
	}
	return strings.Join(l, " | ")
}

func (b *browser) read(out *os.File) {
	defer close(b.done)
	defer out.Close()
	br := bufio.NewReader(out)
	for {
		raw, err := br.ReadBytes(0)
		if err != nil {
			return
		}
		var m message
		if json.Unmarshal(raw[:len(raw)-1], &m) != nil {
			continue
		}
		b.mu.Lock()
		if m.ID != 0 {
			if ch, ok := b.waiting[m.ID]; ok {
				ch <- m.reply
				delete(b.waiting, m.ID)
			}
		} else {
			b.event(m)
		}
		b.mu.Unlock()
	}
}

// event records console errors and the load; b.mu is held.
func (b *browser) event(m message) {
	switch m.Method {
	case "Page.loadEventFired":
		select {
		case b.loaded <- struct{}{}:
		default:
		}
	case "Runtime.exceptionThrown":
		var p struct {
			ExceptionDetails struct{ Text string } `json:"exceptionDetails"`
		}
		json.Unmarshal(m.Params, &p)
		b.console = append(b.console, "exception: "+p.ExceptionDetails.Text)
	case "Runtime.consoleAPICalled":
		var p struct {
			Type string
			Args []struct {
				Value any
			}
		}
		json.Unmarshal(m.Params, &p)
		if p.Type == "error" || p.Type == "assert" || p.Type == "warning" {
			b.console = append(b.console, fmt.Sprintf("console.%s %v", p.Type, p.Args))
		}
	case "Log.entryAdded":
		var p struct {
			Entry struct{ Level, Source, Text, URL string }
		}
		json.Unmarshal(m.Params, &p)
		if p.Entry.Level == "error" || p.Entry.Level == "warning" {
			b.console = append(b.console, fmt.Sprintf("%s %s: %s %s", p.Entry.Level, p.Entry.Source, p.Entry.Text, p.Entry.URL))
		}
	}
}

func (b *browser) consoleErrors() []string {
	b.mu.Lock()
	defer b.mu.Unlock()
	return append([]string(nil), b.console...)
}

func (b *browser) call(ctx context.Context, method string, params any) (json.RawMessage, error) {
	return b.callIn(ctx, b.session, method, params)
}

func (b *browser) callIn(ctx context.Context, session, method string, params any) (json.RawMessage, error) {
	b.mu.Lock()
	b.nextID++
	id := b.nextID
	ch := make(chan reply, 1)
	b.waiting[id] = ch
	b.mu.Unlock()
	msg := map[string]any{"id": id, "method": method}
	if params != nil {
		msg["params"] = params
	}
	if session != "" {
		msg["sessionId"] = session
	}
	data, err := json.Marshal(msg)
	if err != nil {
		return nil, err
	}
	if _, err := b.in.Write(append(data, 0)); err != nil {
		return nil, fmt.Errorf("%s: %w", method, err)
	}
	select {
	case r := <-ch:
		if r.Error != nil {
			return nil, fmt.Errorf("%s: %s", method, r.Error.Message)
		}
		return r.Result, nil
	case <-b.done:
		return nil, fmt.Errorf("%s: chromium closed the pipe", method)
	case <-ctx.Done():
		return nil, fmt.Errorf("%s: %w", method, ctx.Err())
	}
}

func (b *browser) navigate(ctx context.Context, url string) error {
	res, err := b.call(ctx, "Page.navigate", map[string]any{"url": url})
	if err != nil {
		return err
	}
	var nav struct{ ErrorText string }
	json.Unmarshal(res, &nav)
	if nav.ErrorText != "" {
		return fmt.Errorf("navigate %s: %s", url, nav.ErrorText)
	}
	select {
	case <-b.loaded:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("navigate %s: no load event: %w", url, ctx.Err())
	}
}

func (b *browser) eval(ctx context.Context, expr string, v any) error {
	res, err := b.call(ctx, "Runtime.evaluate", map[string]any{"expression": expr, "returnByValue": true})
	if err != nil {
		return err
	}
	var out struct {
		Result           struct{ Value json.RawMessage }
		ExceptionDetails *struct{ Text string }
	}
	if err := json.Unmarshal(res, &out); err != nil {
		return err
	}
	if out.ExceptionDetails != nil {
		return errors.New("probe script: " + out.ExceptionDetails.Text)
	}
	return json.Unmarshal(out.Result.Value, v)
}

// screenshot captures the whole page, not only the viewport.
func (b *browser) screenshot(ctx context.Context, width, height int) ([]byte, error) {
	res, err := b.call(ctx, "Page.captureScreenshot", map[string]any{
		"format": "png", "captureBeyondViewport": true,
		"clip": map[string]any{"x": 0, "y": 0, "width": width, "height": height, "scale": 1},
	})
	if err != nil {
		return nil, err
	}
	var shot struct{ Data string }
	if err := json.Unmarshal(res, &shot); err != nil {
		return nil, err
	}
	return base64.StdEncoding.DecodeString(shot.Data)
}

// close asks Chromium to quit and kills it if it does not within seconds.
func (b *browser) close() {
	ctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
	defer cancel()
	b.callIn(ctx, "", "Browser.close", nil)
	b.in.Close()
	exited := make(chan struct{})
	go func() { b.cmd.Wait(); close(exited) }()
	select {
	case <-exited:
	case <-time.After(5 * time.Second):
		b.cmd.Process.Kill()
		<-exited
	}
}
