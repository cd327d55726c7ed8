package calibrate

import (
	"reflect"
	"strings"
	"testing"
)

// A line list saved by a spreadsheet reads as the same lamp whether it is
// comma-separated, comma-separated after a UTF-8 byte-order mark, or
// semicolon-separated with decimal commas. (Wavelengths: NIST ASD Hg I, air,
// REFERENCE-DATA.md.)
func TestReadLinesFromSpreadsheets(t *testing.T) {
	plain := "name,nm,strength,sigma_nm\nviolet,404.6563,0.5,0.001\ngreen,546.0735,1,0.001\n"
	want, err := ReadLines(strings.NewReader(plain), "mine")
	if err != nil {
		t.Fatal(err)
	}
	for name, text := range map[string]string{
		"with a byte-order mark": "\ufeff" + plain,
		"semicolons":             "name;nm;strength;sigma_nm\nviolet;404,6563;0,5;0,001\ngreen;546,0735;1;0,001\n",
		"semicolons, CRLF":       "name;nm;strength;sigma_nm\r\nviolet;404,6563;0,5;0,001\r\ngreen;546.0735;1;0.001\r\n",
	} {
		got, err := ReadLines(strings.NewReader(text), "mine")
		if err != nil {
			t.Errorf("%s: %v", name, err)
			continue
		}
		if !reflect.DeepEqual(got, want) {
			t.Errorf("%s: %+v, want %+v", name, got.Lines, want.Lines)
		}
	}
	// A comma file stays one, semicolons in a field notwithstanding.
	l, err := ReadLines(strings.NewReader("nm,source\n404.6563,\"NIST; Hg I\"\n546.0735,x\n"), "mine")
	if err != nil || l.Lines[0].Source != "NIST; Hg I" {
		t.Errorf("a comma file with a semicolon in a field: %+v, %v", l.Lines, err)
	}
}
