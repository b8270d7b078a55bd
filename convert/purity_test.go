package convert

import (
	"go/ast"
	"go/build"
	"go/parser"
	"go/token"
	"path/filepath"
	"testing"
)

// allowedImports are the only packages the non-test files may import:
// convert is pure (no I/O, no clock, no concurrency, no logging), as
// glowgate's style guide requires of its numeric packages.
var allowedImports = map[string]bool{
	"errors":    true,
	"fmt":       true,
	"math":      true,
	"math/bits": true,
	"slices":    true,
	"sort":      true,
	"strconv":   true,
	"strings":   true,
}

func TestPackageIsPure(t *testing.T) {
	pkg, err := build.ImportDir(".", 0)
	if err != nil {
		t.Fatalf("read package: %v", err)
	}
	for _, imp := range pkg.Imports {
		if !allowedImports[imp] {
			t.Errorf("non-test files import %q; convert must stay pure (allowed: math, fmt, errors, strings, strconv, sort, slices, math/bits)", imp)
		}
	}
	fset := token.NewFileSet()
	for _, name := range pkg.GoFiles {
		f, err := parser.ParseFile(fset, filepath.Join(pkg.Dir, name), nil, 0)
		if err != nil {
			t.Fatalf("parse %s: %v", name, err)
		}
		for _, d := range f.Decls {
			if g, ok := d.(*ast.GenDecl); ok && g.Tok == token.VAR {
				t.Errorf("%s: package-level var at %s; convert keeps no global state", name, fset.Position(g.Pos()))
			}
			if fd, ok := d.(*ast.FuncDecl); ok && fd.Name.Name == "init" && fd.Recv == nil {
				t.Errorf("%s: init function at %s", name, fset.Position(fd.Pos()))
			}
		}
		ast.Inspect(f, func(n ast.Node) bool {
			switch n := n.(type) {
			case *ast.GoStmt:
				t.Errorf("%s: go statement at %s; convert starts no goroutines", name, fset.Position(n.Pos()))
			case *ast.ChanType:
				t.Errorf("%s: channel type at %s; convert does no concurrency", name, fset.Position(n.Pos()))
			}
			return true
		})
	}
}
