package main

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"

	"lineshot/calibrate/vernier"
)

// demoDoc runs a batch over the demo lab with the example class's vernier
// readings and returns its results and output folder.
func demoDoc(t *testing.T) (batchDoc, string) {
	t.Helper()
	out := filepath.Join(t.TempDir(), "out")
	root := filepath.Join("..", "..", "testdata", "demo")
	readings := filepath.Join("..", "..", "testdata", "vernier", "class-b12.csv")
	if _, stderr, code := runCLI(t, "batch", "--quiet", "--readings", readings, "--out", out, root); code != 0 {
		t.Fatalf("demo batch: exit %d %s", code, stderr)
	}
	return readBatch(t, out), out
}

// The report written a window of photos at a time is the page written at
// once with every plot made first (the "report" template), byte for byte:
// windows of one photo, of a few, and of all.
func TestReportStreamedAsWhole(t *testing.T) {
	doc, out := demoDoc(t)
	if len(doc.Benches) < 3 || len(doc.Vernier) == 0 {
		t.Fatalf("the demo gives %d benches, %d vernier observers", len(doc.Benches), len(doc.Vernier))
	}
	data, err := reportHead(doc)
	if err != nil {
		t.Fatal(err)
	}
	if err := renderPlots(out, data.Benches); err != nil {
		t.Fatal(err)
	}
	var whole bytes.Buffer
	if err := reportTmpl.ExecuteTemplate(&whole, "report", data); err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(whole.Bytes(), []byte("data:image/svg")) || !bytes.Contains(whole.Bytes(), []byte("Vernier readings checked")) {
		t.Fatal("the whole page lacks plots or the vernier section")
	}
	for _, window := range []int{1, 3, reportWindow} {
		var got bytes.Buffer
		if err := writeReportWindowed(&got, out, doc, window); err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got.Bytes(), whole.Bytes()) {
			t.Errorf("window %d: the page differs (%d bytes, whole %d)", window, got.Len(), whole.Len())
		}
	}
}

// encodeBatchDoc, a bench at a time, writes what encodeJSON writes of the
// whole document: the demo's results, and documents with no benches (nil
// and empty), with text the encoder escapes, and with the fields after the
// benches.
func TestEncodeBatchDocAsWhole(t *testing.T) {
	doc, _ := demoDoc(t)
	odd := batchDoc{Tool: "lineshot", Schema: 1, Root: "a <b> & \"c\" \u2028 é",
		Benches: []benchResult{
			{Name: "x</script>", Warnings: []string{"<&>"}, Profiles: map[string][]float32{"p": {1, 2.5}}},
			{Name: "y", CalPhotos: []imageResult{}, Images: map[string]string{}},
		},
		Failures:       []failure{{File: "f\x01.jpg", Reason: "r"}},
		VernierSummary: []string{"s"},
	}
	oneOnly := batchDoc{Tool: "lineshot", Schema: 1, Benches: []benchResult{{Name: "solo"}}, Vernier: []vernier.Observer{}}
	for name, d := range map[string]batchDoc{
		"demo": doc, "odd": odd, "one bench": oneOnly,
		"no benches": {Tool: "lineshot", Schema: 1}, "empty benches": {Tool: "lineshot", Schema: 1, Benches: []benchResult{}},
	} {
		var want, got bytes.Buffer
		if err := encodeJSON(&want, d); err != nil {
			t.Fatal(err)
		}
		if err := encodeBatchDoc(&got, d); err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		if !bytes.Equal(got.Bytes(), want.Bytes()) {
			os.WriteFile(filepath.Join(t.TempDir(), "got.json"), got.Bytes(), 0o644)
			t.Errorf("%s: differs (%d bytes, whole %d)", name, got.Len(), want.Len())
		}
	}
}
