package calibrate

import (
	"bufio"
	"bytes"
	"encoding/csv"
	"io"
	"strings"
)

// SpreadsheetCSV returns a CSV reader for r as spreadsheets save CSV: a
// UTF-8 byte-order mark before the first row dropped; fields separated by
// commas or, when the first row holds more semicolons than commas, by
// semicolons, which is how they are saved where the decimal mark is a
// comma (much of Europe; semi reports it, and Number then reads a decimal
// comma); rows of any length; '#' starting a comment row; leading spaces
// trimmed. (Common practice of spreadsheet programs, from memory.) A
// double quote inside an unquoted field is taken as written: a reading
// typed in a text editor as 199°10'30" (seconds) was refused with
// encoding/csv's `bare " in non-quoted-field`.
func SpreadsheetCSV(r io.Reader) (cr *csv.Reader, semi bool) {
	br := bufio.NewReader(r)
	if b, _ := br.Peek(3); bytes.Equal(b, []byte("\xef\xbb\xbf")) {
		br.Discard(3)
	}
	head, _ := br.Peek(4096)
	if i := bytes.IndexByte(head, '\n'); i >= 0 {
		head = head[:i]
	}
	semi = bytes.Count(head, []byte(";")) > bytes.Count(head, []byte(","))
	cr = csv.NewReader(br)
	if semi {
		cr.Comma = ';'
	}
	cr.Comment = '#'
	cr.FieldsPerRecord = -1
	cr.TrimLeadingSpace = true
	cr.LazyQuotes = true
	return cr, semi
}

// Number is a number's text from a SpreadsheetCSV field, with a decimal
// comma made a point when the file is separated by semicolons.
func Number(text string, semi bool) string {
	if semi {
		return strings.ReplaceAll(text, ",", ".")
	}
	return text
}
