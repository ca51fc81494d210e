package page

import (
	"bytes"
	"compress/gzip"
	"crypto/sha256"
	"encoding/base64"
	"encoding/binary"
	"encoding/json"
	"io"
	"math"
	"strings"
	"testing"
)

const xss = `</script><img src=x onerror=alert(1)>`

func sample() Data {
	return Data{
		Title: "map of " + xss, Subtitle: "3 points", Caution: "careful",
		X: []float32{0, 1, 2}, Y: []float32{0, -1, 5},
		IDs: []string{`a"b'c<d>`, "γδ", ""}, IDName: "id",
		Rows:    []int64{0, 2, 5},
		Heading: "type", Groups: []Group{{xss, 2, "#112233"}}, Codes: []int32{0, 0, -1}, PaletteSize: 24,
		Placed:  []bool{false, true, true},
		Missing: "#a4a4a4", Reference: "#d4d4d4", Plain: "#3a3a3a",
	}
}

// between returns the text of s between the first start and the next end.
func between(t *testing.T, s, start, end string) string {
	t.Helper()
	i := strings.Index(s, start)
	if i < 0 {
		t.Fatalf("page lacks %q", start)
	}
	s = s[i+len(start):]
	j := strings.Index(s, end)
	if j < 0 {
		t.Fatalf("page lacks %q after %q", end, start)
	}
	return s[:j]
}

func write(t *testing.T, d Data) string {
	t.Helper()
	var b bytes.Buffer
	if err := Write(&b, d); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

// The file can be read back as documented: header, then the data block.
func TestWriteRoundTrip(t *testing.T) {
	html := write(t, sample())
	var m meta
	if err := json.Unmarshal([]byte(between(t, html, `<script type="application/json" id="nj-meta">`, "</script>")), &m); err != nil {
		t.Fatal(err)
	}
	if m.N != 3 || m.Groups[0].Label != xss || m.NoValue != 1 || m.Bounds != [4]float64{0, -1, 2, 5} {
		t.Fatalf("header %+v", m)
	}
	raw, err := base64.StdEncoding.DecodeString(between(t, html, `<script type="application/octet-stream" id="nj-data">`, "</script>"))
	if err != nil {
		t.Fatal(err)
	}
	zr, err := gzip.NewReader(bytes.NewReader(raw))
	if err != nil {
		t.Fatal(err)
	}
	block, _ := io.ReadAll(zr)
	if len(block) != m.Bytes {
		t.Fatalf("block of %d bytes, header says %d", len(block), m.Bytes)
	}
	at := map[string]section{}
	for _, s := range m.Sections {
		if s.Offset%8 != 0 {
			t.Errorf("section %s at offset %d", s.Name, s.Offset)
		}
		at[s.Name] = s
	}
	y := at["y"]
	if got := math.Float32frombits(binary.LittleEndian.Uint32(block[y.Offset+8:])); got != 5 {
		t.Errorf("y[2] = %g", got)
	}
	if c := at["codes"]; c.Type != "u8" || !bytes.Equal(block[c.Offset:c.Offset+3], []byte{1, 1, 0}) {
		t.Errorf("codes %+v % x", c, block[c.Offset:c.Offset+3])
	}
	if l, txt := at["idLengths"], at["idText"]; l.Type != "u8" || string(block[txt.Offset:txt.Offset+txt.Len]) != `a"b'c<d>γδ` {
		t.Errorf("ids %q", block[txt.Offset:txt.Offset+txt.Len])
	}
	if r := at["rows"]; r.Type != "u32" || binary.LittleEndian.Uint32(block[r.Offset+8:]) != 5 {
		t.Errorf("rows %+v", r)
	}
	if p := at["placed"]; !bytes.Equal(block[p.Offset:p.Offset+3], []byte{0, 1, 1}) {
		t.Errorf("placed % x", block[p.Offset:p.Offset+3])
	}
}

// Data never becomes markup: the page holds no raw tag from a label or id,
// and its policy allows only its own script.
func TestWriteEscapes(t *testing.T) {
	html := write(t, sample())
	if strings.Contains(html, "<img") || strings.Count(html, "</script>") != 3 {
		t.Errorf("a label leaked into the markup (%d script ends)", strings.Count(html, "</script>"))
	}
	sum := sha256.Sum256([]byte(between(t, html, "<script>", "</script>")))
	want := "script-src 'sha256-" + base64.StdEncoding.EncodeToString(sum[:]) + "'"
	if !strings.Contains(html, want) {
		t.Errorf("content security policy does not name the script's hash %s", want)
	}
	for _, bad := range []string{"http://", "https://", "src=\"", "@import", "url("} {
		if strings.Contains(html, bad) {
			t.Errorf("page refers outside itself: %q", bad)
		}
	}
}

func TestWriteDeterministicAndChecked(t *testing.T) {
	a, b := write(t, sample()), write(t, sample())
	if a != b {
		t.Error("two pages of the same data differ")
	}
	bad := []struct {
		name string
		edit func(*Data)
		want string
	}{
		{"ragged", func(d *Data) { d.Y = d.Y[:2] }, "2 y positions"},
		{"ids", func(d *Data) { d.IDs = d.IDs[:1] }, "1 ids for 3 rows"},
		{"both", func(d *Data) { d.Values = []float32{1, 2, 3}; d.Scale = &Scale{} }, "both"},
		{"group", func(d *Data) { d.Codes[1] = 4 }, "group 4 of 1"},
		{"nan", func(d *Data) { d.X[0] = float32(math.NaN()) }, "non-finite"},
	}
	for _, tc := range bad {
		d := sample()
		tc.edit(&d)
		if err := Write(io.Discard, d); err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: error %v, want %q", tc.name, err, tc.want)
		}
	}
}

func TestWideCodesAndLongIDs(t *testing.T) {
	d := sample()
	d.Groups = make([]Group, 300)
	d.Codes = []int32{299, 0, -1}
	d.IDs[0] = strings.Repeat("x", 300)
	html := write(t, d)
	var m meta
	if err := json.Unmarshal([]byte(between(t, html, `id="nj-meta">`, "</script>")), &m); err != nil {
		t.Fatal(err)
	}
	for _, s := range m.Sections {
		if s.Name == "codes" && s.Type != "u16" || s.Name == "idLengths" && s.Type != "u16" {
			t.Errorf("section %s is %s", s.Name, s.Type)
		}
	}
}
