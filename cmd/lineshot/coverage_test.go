package main

import (
	"fmt"
	"math"
	"os"
	"testing"
)

// Honest uncertainties: over repeated simulated sessions with fresh noise
// (a mercury calibration photo and a hydrogen photo each), the true R lies
// within the reported 1σ in 60-76 % and within 2σ in at least 93 % of
// them. The true R is the same fit applied to the NIST wavelengths the
// simulator rendered (Rydberg.RRef), since the Bohr formula itself misses
// them by 1.2e-5 (fine structure).
func TestRydbergUncertaintyCoverage(t *testing.T) {
	sessions := envInt("LINESHOT_COVERAGE_SESSIONS", 160) // more for a finer figure
	dir := t.TempDir()
	s := setup{name: "coverage bench", lpm: 600, w: 960, h: 540, psf: 1.3, tilt: 1.5, jpegQ: 90, lineH: float64(envInt("LH", 0))}
	covCfg := defaultCfg
	covCfg.calLamp = "mercury"
	var in1, in2, n int
	var pulls []float64
	for k := 0; k < sessions; k++ {
		hg, _ := s.render(t, dir, "mercury", uint64(10000+2*k))
		h, _ := s.render(t, dir, "hydrogen", uint64(10001+2*k))
		cal, _, err := buildCalibration([]string{hg}, covCfg)
		if err != nil {
			t.Fatalf("session %d: %v", k, err)
		}
		r := measureOne(h, &cal, covCfg)
		if r.Rydberg == nil {
			t.Fatalf("session %d: no Rydberg fit (%s)", k, r.Error)
		}
		pull := (r.Rydberg.R - r.Rydberg.RRef) / r.Rydberg.Sigma
		pulls = append(pulls, pull)
		n++
		if math.Abs(pull) <= 1 {
			in1++
		}
		if math.Abs(pull) <= 2 {
			in2++
		}
	}
	f1, f2 := float64(in1)/float64(n), float64(in2)/float64(n)
	var m, v float64
	for _, p := range pulls {
		m += p / float64(n)
	}
	for _, p := range pulls {
		v += (p - m) * (p - m) / float64(n-1)
	}
	t.Logf("%d sessions: within 1σ %.1f %%, within 2σ %.1f %%, pull mean %+.2f, pull sd %.2f", n, 100*f1, 100*f2, m, math.Sqrt(v))
	if f1 < 0.60 || f1 > 0.76 {
		t.Errorf("true R within 1σ in %.1f %% of sessions, want 60-76 %%", 100*f1)
	}
	if f2 < 0.93 {
		t.Errorf("true R within 2σ in %.1f %% of sessions, want at least 93 %%", 100*f2)
	}
}

func envInt(name string, def int) int {
	var v int
	if _, err := fmt.Sscan(os.Getenv(name), &v); err == nil && v > 0 {
		return v
	}
	return def
}
