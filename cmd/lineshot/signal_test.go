package main

import (
	"bytes"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// A real SIGINT to a running batch (the built binary, as a user's Ctrl-C):
// it stops after the photo in hand, writes complete outputs, leaves no
// half-written file, and the next run finishes the rest without redoing it.
func TestBatchSIGINT(t *testing.T) {
	bin := filepath.Join(t.TempDir(), "lineshot")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("build: %v\n%s", err, out)
	}
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
	cmd.Process.Signal(syscall.SIGINT)
	err := cmd.Wait()
	if ee, ok := err.(*exec.ExitError); !ok || ee.ExitCode() != exitFailed {
		t.Fatalf("exit: %v\n%s", err, stderr.String())
	}
	if !strings.Contains(stderr.String(), "interrupted") {
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
