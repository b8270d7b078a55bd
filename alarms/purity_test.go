package alarms

import (
	"go/ast"
	"go/build"
	"go/parser"
	"go/token"
	"path/filepath"
	"testing"
)

// allowedImports are the only packages the non-test files may import:
// alarms is pure (no I/O, no clock, no concurrency, no logging), as
// glowgate's design requires. "time" is allowed for its types only (see
// clockFuncs).
var allowedImports = map[string]bool{
	"errors":  true,
	"fmt":     true,
	"math":    true,
	"slices":  true,
	"strconv": true,
	"strings": true,
	"time":    true,
}

// clockFuncs are the functions of package time that read the clock or
// wait: time is an argument in alarms, never read.
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
		if !allowedImports[imp] {
			t.Errorf("non-test files import %q; alarms must stay pure (allowed: errors, fmt, math, slices, strconv, strings, time for its types)", imp)
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
				t.Errorf("%s: package-level var at %s; alarms keeps no global state", name, fset.Position(g.Pos()))
			}
			if fd, ok := d.(*ast.FuncDecl); ok && fd.Name.Name == "init" && fd.Recv == nil {
				t.Errorf("%s: init function at %s", name, fset.Position(fd.Pos()))
			}
		}
		ast.Inspect(f, func(n ast.Node) bool {
			switch n := n.(type) {
			case *ast.GoStmt:
				t.Errorf("%s: go statement at %s; alarms starts no goroutines", name, fset.Position(n.Pos()))
			case *ast.ChanType:
				t.Errorf("%s: channel type at %s; alarms does no concurrency", name, fset.Position(n.Pos()))
			case *ast.SelectorExpr:
				if id, ok := n.X.(*ast.Ident); ok && timeName != "" && id.Name == timeName && clockFuncs[n.Sel.Name] {
					t.Errorf("%s: time.%s at %s; alarms takes time as an argument", name, n.Sel.Name, fset.Position(n.Pos()))
				}
			}
			return true
		})
	}
}
