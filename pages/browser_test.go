package pages

import (
	"bytes"
	"context"
	"encoding/binary"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

const chromiumPath = "/usr/bin/chromium"

// runChromium runs headless Chromium on a local file with every network
// feature we can switch off, and returns its standard output.
func runChromium(t *testing.T, dir string, args ...string) []byte {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	base := []string{"--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
		"--disable-component-update", "--disable-sync", "--user-data-dir=" + filepath.Join(dir, "profile")}
	cmd := exec.CommandContext(ctx, chromiumPath, append(base, args...)...)
	var stdout, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &stdout, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("chromium %v: %v\n%s", args, err, stderr.String())
	}
	return stdout.Bytes()
}

// TestReportInBrowser loads report.html in headless Chromium: the parsed
// DOM must hold every section heading and every chart, and a screenshot
// must come out. Set DISCRIMEN_REPORT_SHOT to a path to keep the picture.
func TestReportInBrowser(t *testing.T) {
	if _, err := os.Stat(chromiumPath); err != nil {
		t.Skipf("no browser at %s (install Debian's chromium package to run this test): %v", chromiumPath, err)
	}
	if testing.Short() {
		t.Skip("starts a browser")
	}
	dir := t.TempDir()
	page, err := Report(htmlReport(true))
	if err != nil {
		t.Fatal(err)
	}
	file := filepath.Join(dir, "report.html")
	if err := os.WriteFile(file, page, 0o644); err != nil {
		t.Fatal(err)
	}
	url := "file://" + file

	dom := string(runChromium(t, dir, "--dump-dom", url))
	if !strings.Contains(dom, "</html>") {
		t.Fatalf("dumped DOM is incomplete (%d bytes)", len(dom))
	}
	for _, s := range htmlSections {
		if !strings.Contains(dom, `<section id="`+s.id+`">`) || !strings.Contains(dom, "<h2>"+s.title+"</h2>") {
			t.Errorf("DOM lacks section %q with heading %q", s.id, s.title)
		}
	}
	// The browser's parser keeps every chart: as many <svg> elements and
	// closing tags as the source has (a broken fragment would swallow the
	// ones after it), and no parser error page.
	want := strings.Count(string(page), "<svg ")
	if got := strings.Count(dom, "<svg "); got != want {
		t.Errorf("DOM has %d <svg> elements, source %d", got, want)
	}
	if got := strings.Count(dom, "</svg>"); got != want {
		t.Errorf("DOM closes %d <svg> elements, source %d", got, want)
	}
	if strings.Contains(dom, "parsererror") || strings.Contains(dom, "<script") {
		t.Error("DOM holds a parser error or a script")
	}
	if !strings.Contains(dom, "switch&lt;script&gt;alert(1)&lt;/script&gt;") {
		t.Error("escaped hypothesis name lost in the DOM")
	}

	shot := filepath.Join(dir, "shot.png")
	runChromium(t, dir, "--screenshot="+shot, "--window-size=1300,4000", "--hide-scrollbars", url)
	png, err := os.ReadFile(shot)
	if err != nil {
		t.Fatalf("no screenshot: %v", err)
	}
	// PNG signature, then the IHDR chunk's width and height (PNG
	// specification, ISO/IEC 15948, section 11.2.2).
	if len(png) < 24 || !bytes.Equal(png[:8], []byte("\x89PNG\r\n\x1a\n")) || string(png[12:16]) != "IHDR" {
		t.Fatalf("screenshot is not a PNG (%d bytes)", len(png))
	}
	w, h := binary.BigEndian.Uint32(png[16:20]), binary.BigEndian.Uint32(png[20:24])
	if w != 1300 || h != 4000 {
		t.Errorf("screenshot is %d×%d, want 1300×4000", w, h)
	}
	// A blank 1300×4000 page compresses to a few kilobytes; text and
	// charts take far more.
	if len(png) < 150_000 {
		t.Errorf("screenshot only %d bytes: the page looks empty", len(png))
	}
	if keep := os.Getenv("DISCRIMEN_REPORT_SHOT"); keep != "" {
		if err := os.WriteFile(keep, png, 0o644); err != nil {
			t.Fatal(err)
		}
	}
}
