package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// buildLineshot builds the command into the test's temp folder, for the
// tests that need a process of its own (signals, its standard output).
func buildLineshot(t *testing.T) string {
	t.Helper()
	bin := filepath.Join(t.TempDir(), "lineshot")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("build: %v\n%s", err, out)
	}
	return bin
}

// A real SIGINT to a running batch (the built binary, as a user's Ctrl-C),
// a SIGTERM (kill, a shutdown) and a SIGHUP (the terminal closed): each
// stops it after the photo in hand; it writes complete outputs, leaves no
// half-written file, and the next run finishes the rest without redoing
// it. (SIGTERM and SIGHUP used to end it at once.)
func TestBatchSIGINT(t *testing.T) {
	bin := buildLineshot(t)
	for _, sig := range []syscall.Signal{syscall.SIGINT, syscall.SIGTERM, syscall.SIGHUP} {
		t.Run(sig.String(), func(t *testing.T) { batchStoppedBy(t, bin, sig) })
	}
}

func batchStoppedBy(t *testing.T, bin string, sig syscall.Signal) {
	root := makeLab(t)
	// More photos, so that the signal lands midway.
	for i := 0; i < 6; i++ {
		p, _ := setups[1].render(t, t.TempDir(), "hydrogen", uint64(200+i))
		os.Rename(p, filepath.Join(root, "bench-a", "extra-"+string(rune('a'+i))+".jpg"))
	}
	out := filepath.Join(t.TempDir(), "results")
	cmd := exec.Command(bin, "batch", "-j", "1", "--quiet", "--out", out, root)
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	deadline := time.Now().Add(60 * time.Second)
	for time.Now().Before(deadline) {
		if m, _ := filepath.Glob(filepath.Join(out, "cache", "*.json")); len(m) >= 3 {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	cmd.Process.Signal(sig)
	err := cmd.Wait()
	if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != exitFailed {
		t.Fatalf("exit: %v\n%s", err, stderr.String())
	}
	if !strings.Contains(stderr.String(), "interrupted") || !strings.Contains(stderr.String(), "stopping after the work in hand") {
		t.Errorf("stderr: %s", stderr.String())
	}
	readBatch(t, out) // complete and parseable
	filepath.Walk(out, func(p string, fi os.FileInfo, err error) error {
		if err == nil && strings.Contains(filepath.Base(p), ".tmp-") {
			t.Errorf("half-written file left: %s", p)
		}
		return nil
	})
	cached, _ := filepath.Glob(filepath.Join(out, "cache", "*.json"))
	again, err := exec.Command(bin, "batch", "--quiet", "--out", out, root).Output()
	if len(cached) == 0 || !strings.Contains(string(again), "unchanged since the last run") {
		t.Errorf("rerun after %d cached: %v\n%s", len(cached), err, again)
	}
	if d := readBatch(t, out); len(d.Benches) != 3 {
		t.Errorf("after the rerun: %d benches", len(d.Benches))
	}
}

// The first Ctrl-C cancels the work and says so; the second ends the
// process at once. Run in a child process (this test binary again), which
// waits far longer than the test does after the first signal.
func TestSecondInterruptEndsAtOnce(t *testing.T) {
	if os.Getenv("LINESHOT_INTERRUPT_CHILD") == "1" {
		ctx, stop := interruptible(os.Stderr)
		defer stop()
		os.Stdout.WriteString("ready\n")
		<-ctx.Done()
		time.Sleep(50 * time.Millisecond) // (the handler has been given back by now)
		os.Stdout.WriteString("cancelled\n")
		time.Sleep(60 * time.Second) // a long piece of work after the first Ctrl-C
		os.Exit(0)
	}
	cmd := exec.Command(os.Args[0], "-test.run", "^TestSecondInterruptEndsAtOnce$")
	cmd.Env = append(os.Environ(), "LINESHOT_INTERRUPT_CHILD=1")
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	line := make([]byte, 64)
	readLine := func(want string) {
		t.Helper()
		n, err := out.Read(line)
		if err != nil || !strings.Contains(string(line[:n]), want) {
			cmd.Process.Kill()
			t.Fatalf("child said %q (%v), want %q", line[:n], err, want)
		}
	}
	readLine("ready")
	cmd.Process.Signal(syscall.SIGINT)
	readLine("cancelled")
	cmd.Process.Signal(syscall.SIGINT)
	err = cmd.Wait()
	ee, ok := err.(*exec.ExitError)
	if !ok {
		t.Fatalf("the child outlived the second Ctrl-C: %v", err)
	}
	if ws, ok := ee.Sys().(syscall.WaitStatus); !ok || !ws.Signaled() || ws.Signal() != syscall.SIGINT {
		t.Errorf("the child ended with %v, not by the second Ctrl-C", err)
	}
	if !strings.Contains(stderr.String(), "Ctrl-C again to stop at once") {
		t.Errorf("stderr: %q", stderr.String())
	}
}

// Tables sent to a file on a full disk (here /dev/full) end in one line
// saying so and exit status 1, not a silent success with the output lost.
func TestOutputToFullDisk(t *testing.T) {
	full, err := os.OpenFile("/dev/full", os.O_WRONLY, 0)
	if err != nil {
		t.Skip("no /dev/full here")
	}
	defer full.Close()
	bin := buildLineshot(t)
	for _, args := range [][]string{{"lines", "mercury"}, {"measure", filepath.Join("..", "..", "testdata", "demo", "bench2", "mercury.jpg")}} {
		cmd := exec.Command(bin, args...)
		cmd.Stdout = full
		var stderr bytes.Buffer
		cmd.Stderr = &stderr
		err := cmd.Run()
		if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != exitFailed {
			t.Errorf("%v: exit %v, want %d", args, err, exitFailed)
		}
		if !strings.Contains(stderr.String(), "no space left on device") || strings.Count(stderr.String(), "\n") != 1 {
			t.Errorf("%v: stderr %q", args, stderr.String())
		}
	}
}

// cancelAfter is a context whose Err reports nil n times and then
// context.Canceled: an interruption that lands after n photos, with no
// timing involved.
type cancelAfter struct {
	context.Context
	n int
}

func (c *cancelAfter) Err() error {
	if c.n > 0 {
		c.n--
		return nil
	}
	return context.Canceled
}

// measure interrupted after the first of three photos gives that photo's
// result (a complete JSON document), says how far it got, and exits 1;
// it used to print nothing and "context canceled".
func TestMeasureInterruptedKeepsWhatWasMeasured(t *testing.T) {
	dir := t.TempDir()
	var photos []string
	for i := range 3 {
		p, _ := simulate(t, dir, fmt.Sprintf("hg%d.jpg", i), "--lamp", "mercury", "--seed", fmt.Sprint(20+i))
		photos = append(photos, p)
	}
	var out, errb bytes.Buffer
	err := run(&cancelAfter{Context: context.Background(), n: 1}, append([]string{"measure", "--json"}, photos...), &out, &errb)
	code := exitCode(err, &errb)
	var doc document
	if jerr := json.Unmarshal(out.Bytes(), &doc); jerr != nil {
		t.Fatalf("stdout is not a JSON document: %v\n%s", jerr, out.String())
	}
	if code != exitFailed || len(doc.Images) != 1 || doc.Images[0].File != photos[0] || doc.Images[0].Lamp != "mercury" {
		t.Errorf("exit %d, %d images (%+v)", code, len(doc.Images), doc.Images)
	}
	if !strings.Contains(errb.String(), "interrupted: 1 of 3 photos measured") || strings.Contains(errb.String(), "context canceled") {
		t.Errorf("stderr: %s", errb.String())
	}
}
