package convert

import (
	"bufio"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// refTable is a reference table from ../testdata: '#' comment lines, a
// header line of column names, then rows of numbers.
type refTable struct {
	comments []string
	cols     map[string]int
	rows     [][]float64
}

// readRefTable reads ../testdata/name, written by the script of the same
// name with a .py suffix (run with Debian's python3-scipy).
func readRefTable(t *testing.T, name string) *refTable {
	t.Helper()
	path := filepath.Join("..", "testdata", name)
	f, err := os.Open(path)
	if err != nil {
		t.Fatalf("open reference table: %v", err)
	}
	defer f.Close()
	tb := &refTable{cols: map[string]int{}}
	sc := bufio.NewScanner(f)
	line := 0
	for sc.Scan() {
		line++
		text := strings.TrimSpace(sc.Text())
		switch {
		case text == "":
		case strings.HasPrefix(text, "#"):
			tb.comments = append(tb.comments, text)
		case len(tb.cols) == 0:
			for i, c := range strings.Split(text, ",") {
				tb.cols[c] = i
			}
		default:
			var row []float64
			for _, field := range strings.Split(text, ",") {
				v, err := strconv.ParseFloat(field, 64)
				if err != nil {
					t.Fatalf("%s:%d: %v", path, line, err)
				}
				row = append(row, v)
			}
			if len(row) != len(tb.cols) {
				t.Fatalf("%s:%d: %d fields, header has %d", path, line, len(row), len(tb.cols))
			}
			tb.rows = append(tb.rows, row)
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	if len(tb.rows) == 0 {
		t.Fatalf("%s: no rows", path)
	}
	return tb
}

// col returns the index of column name.
func (tb *refTable) col(t *testing.T, name string) int {
	t.Helper()
	i, ok := tb.cols[name]
	if !ok {
		t.Fatalf("reference table has no column %q", name)
	}
	return i
}

// commentValue returns the number after key= in the comment lines.
func (tb *refTable) commentValue(t *testing.T, key string) float64 {
	t.Helper()
	for _, c := range tb.comments {
		if i := strings.Index(c, key+"="); i >= 0 {
			f := strings.Fields(c[i+len(key)+1:])
			v, err := strconv.ParseFloat(strings.TrimSuffix(f[0], ";"), 64)
			if err != nil {
				t.Fatalf("comment %q: %v", c, err)
			}
			return v
		}
	}
	t.Fatalf("reference table comments have no %s=", key)
	return 0
}
