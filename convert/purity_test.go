package convert

import (
	"go/ast"
	"go/build"
	"go/parser"
	"go/token"
	"path/filepath"
	"strings"
	"testing"
)

// allowedImports are the only packages the non-test files may import:
// convert is pure (no I/O, no clock, no concurrency, no logging), as
// glowgate's style guide requires of its numeric packages. Packages of
// gonum (pure numerics: quadrature, dense linear algebra, distributions)
// are allowed too, and "time" for its types only (see clockFuncs).
var allowedImports = map[string]bool{
	"errors":    true,
	"fmt":       true,
	"math":      true,
	"math/bits": true,
	"slices":    true,
	"sort":      true,
	"strconv":   true,
	"strings":   true,
	"time":      true,
}

// gonumPrefix is the import path prefix of gonum's packages.
const gonumPrefix = "gonum.org/v1/gonum/"

// clockFuncs are the functions of package time that read the clock or
// wait: time is an argument in convert, never read.
var clockFuncs = map[string]bool{
	"Now": true, "Since": true, "Until": true, "Sleep": true, "After": true,
	"AfterFunc": true, "Tick": true, "NewTimer": true, "NewTicker": true,
}

func TestPackageIsPure(t *testing.T) {
	pkg, err := build.ImportDir(".", 0)
	if err != nil {
		t.Fatalf("read package: %v", err)
	}
	for _, imp := range pkg.Imports {
		if !allowedImports[imp] && !strings.HasPrefix(imp, gonumPrefix) {
			t.Errorf("non-test files import %q; convert must stay pure (allowed: math, fmt, errors, strings, strconv, sort, slices, math/bits, time for its types, gonum)", imp)
		}
	}
	fset := token.NewFileSet()
	for _, name := range pkg.GoFiles {
		f, err := parser.ParseFile(fset, filepath.Join(pkg.Dir, name), nil, 0)
		if err != nil {
			t.Fatalf("parse %s: %v", name, err)
		}
		timeName := ""
		for _, imp := range f.Imports {
			if imp.Path.Value == `"time"` {
				timeName = "time"
				if imp.Name != nil {
					timeName = imp.Name.Name
				}
			}
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
			case *ast.SelectorExpr:
				if id, ok := n.X.(*ast.Ident); ok && timeName != "" && id.Name == timeName && clockFuncs[n.Sel.Name] {
					t.Errorf("%s: time.%s at %s; convert takes time as an argument", name, n.Sel.Name, fset.Position(n.Pos()))
				}
			}
			return true
		})
	}
}
