package config

import (
	"errors"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

var update = flag.Bool("update", false, "rewrite the .err golden files under testdata/invalid")

// TestInvalid parses each file under testdata/invalid, one invalid case per
// file, and compares the complete error text with the file's .err golden
// (regenerate with go test -run TestInvalid -update, then review the diff).
func TestInvalid(t *testing.T) {
	files, err := filepath.Glob("testdata/invalid/*.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(files) < 18 {
		t.Fatalf("found %d invalid cases, want at least 18", len(files))
	}
	for _, path := range files {
		name := filepath.Base(path)
		t.Run(strings.TrimSuffix(name, ".yaml"), func(t *testing.T) {
			data, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			cfg, err := Parse(name, data)
			if err == nil {
				t.Fatalf("Parse succeeded, want errors")
			}
			if cfg != nil {
				t.Errorf("Parse returned a Config with its errors")
			}
			var errs Errors
			if !errors.As(err, &errs) || len(errs) == 0 {
				t.Fatalf("error %T is not a non-empty Errors: %v", err, err)
			}
			lines := strings.Count(string(data), "\n") + 1
			for i, e := range errs {
				if e.File != name || e.Msg == "" || e.Line < 0 || e.Line > lines {
					t.Errorf("problem %d is malformed: %#v", i, e)
				}
				if i > 0 && e.Line < errs[i-1].Line {
					t.Errorf("problems not sorted by line: %d after %d", e.Line, errs[i-1].Line)
				}
			}
			got := err.Error() + "\n"
			golden := strings.TrimSuffix(path, ".yaml") + ".err"
			if *update {
				if err := os.WriteFile(golden, []byte(got), 0o644); err != nil {
					t.Fatal(err)
				}
				return
			}
			want, err := os.ReadFile(golden)
			if err != nil {
				t.Fatalf("%v (run with -update to create it)", err)
			}
			if got != string(want) {
				t.Errorf("errors differ from %s\ngot:\n%swant:\n%s", golden, got, want)
			}
		})
	}
}

// TestInvalidGoldensHaveCases finds .err files left behind by a removed case.
func TestInvalidGoldensHaveCases(t *testing.T) {
	goldens, err := filepath.Glob("testdata/invalid/*.err")
	if err != nil {
		t.Fatal(err)
	}
	for _, g := range goldens {
		if _, err := os.Stat(strings.TrimSuffix(g, ".err") + ".yaml"); err != nil {
			t.Errorf("%s has no case: %v", g, err)
		}
	}
}
