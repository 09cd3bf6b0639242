package report

import (
	"bytes"
	"context"
	"image"
	_ "image/png"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/loadline/loadline/internal/corpus"
)

// browser finds a headless Chromium (Debian's chromium package), skipping
// the test with a message when there is none, or failing it when
// LOADLINE_REQUIRE_CORPUS=1.
func browser(t *testing.T) string {
	t.Helper()
	for _, name := range []string{"chromium", "chromium-browser", "google-chrome"} {
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	corpus.Missing(t, "no headless browser found (apt-get install chromium)")
	return ""
}

// TestSignoffHTMLInBrowser renders the sign-off page in a real headless
// Chromium, takes a screenshot and checks that it is not blank and that the
// page wrote nothing to the browser's console (a page with no script
// should be silent; a failed load or a parse problem would speak).
func TestSignoffHTMLInBrowser(t *testing.T) {
	bin := browser(t)
	dir := t.TempDir()
	page := filepath.Join(dir, "signoff.html")
	var b bytes.Buffer
	if err := SignoffHTML(&b, signoffFixture(t), SignoffOptions{Version: "test"}); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(page, b.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	shot := filepath.Join(dir, "shot.png")
	// A hang guard, not a speed check: headless chromium can wait for
	// ever on a stuck page or profile, and go test's own -timeout would
	// leave it running. The bound is far above any real render.
	const hangGuard = 5 * time.Minute
	ctx, cancel := context.WithTimeout(context.Background(), hangGuard)
	defer cancel()
	// The flags Debian's chromium needs in a container without a display,
	// and those that keep it from reaching for the network on its own.
	cmd := exec.CommandContext(ctx, bin, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
		"--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync",
		"--user-data-dir="+filepath.Join(dir, "profile"), "--enable-logging=stderr", "--v=0",
		"--window-size=1100,1600", "--screenshot="+shot, "file://"+page)
	cmd.Env = append(os.Environ(), "HOME="+dir)
	out, err := cmd.CombinedOutput()
	if ctx.Err() != nil {
		t.Fatalf("chromium did not finish; stopped by the %s hang guard: %v\n%s", hangGuard, err, out)
	}
	if err != nil {
		t.Fatalf("chromium: %v\n%s", err, out)
	}
	for _, line := range strings.Split(string(out), "\n") {
		if strings.Contains(line, ":CONSOLE") {
			t.Errorf("the page wrote to the console: %s", line)
		}
	}
	f, err := os.Open(shot)
	if err != nil {
		t.Fatalf("no screenshot: %v\n%s", err, out)
	}
	defer f.Close()
	img, _, err := image.Decode(f)
	if err != nil {
		t.Fatal(err)
	}
	// Not blank: a fair share of the pixels are not the background, and
	// there is more than text's black on white (the charts' colours).
	bounds := img.Bounds()
	inked, colours := 0, map[[3]uint32]bool{}
	for y := bounds.Min.Y; y < bounds.Max.Y; y += 2 {
		for x := bounds.Min.X; x < bounds.Max.X; x += 2 {
			r, g, b, _ := img.At(x, y).RGBA()
			if r < 0xf000 || g < 0xf000 || b < 0xf000 {
				inked++
			}
			colours[[3]uint32{r >> 12, g >> 12, b >> 12}] = true
		}
	}
	total := bounds.Dx() * bounds.Dy() / 4
	if inked*100 < total*2 {
		t.Errorf("the screenshot is almost blank: %d of %d sampled pixels inked", inked, total)
	}
	if len(colours) < 8 {
		t.Errorf("the screenshot has %d colours; the charts should add several", len(colours))
	}
}
