// Package puritytest checks that a package is pure, as glowgate's style
// guide requires of convert and alarms: no I/O, no clock, no concurrency,
// no logging, no global state. It reads the package's non-test files with
// go/build and go/parser.
package puritytest

import (
	"go/ast"
	"go/build"
	"go/parser"
	"go/token"
	"path/filepath"
	"strings"
	"testing"
)

// clockFuncs are the functions of package time that read the clock or
// wait: in a pure package time is an argument, never read.
var clockFuncs = map[string]bool{
	"Now": true, "Since": true, "Until": true, "Sleep": true, "After": true,
	"AfterFunc": true, "Tick": true, "NewTimer": true, "NewTicker": true,
}

// Check fails t for every import of the package in dir that is neither in
// allowed nor under one of the allowedPrefixes, every package-level var,
// init function, go statement and channel type, and every call of package
// time that reads the clock or waits ("time" itself may be allowed for its
// types).
func Check(t *testing.T, dir string, allowed []string, allowedPrefixes ...string) {
	t.Helper()
	pkg, err := build.ImportDir(dir, 0)
	if err != nil {
		t.Fatalf("read package: %v", err)
	}
	ok := map[string]bool{}
	for _, a := range allowed {
		ok[a] = true
	}
	for _, imp := range pkg.Imports {
		prefixed := false
		for _, p := range allowedPrefixes {
			prefixed = prefixed || strings.HasPrefix(imp, p)
		}
		if !ok[imp] && !prefixed {
			t.Errorf("non-test files import %q; %s must stay pure (allowed: %s)", imp, pkg.Name,
				strings.Join(append(append([]string(nil), allowed...), allowedPrefixes...), ", "))
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
				t.Errorf("%s: package-level var at %s; %s keeps no global state", name, fset.Position(g.Pos()), pkg.Name)
			}
			if fd, ok := d.(*ast.FuncDecl); ok && fd.Name.Name == "init" && fd.Recv == nil {
				t.Errorf("%s: init function at %s", name, fset.Position(fd.Pos()))
			}
		}
		ast.Inspect(f, func(n ast.Node) bool {
			switch n := n.(type) {
			case *ast.GoStmt:
				t.Errorf("%s: go statement at %s; %s starts no goroutines", name, fset.Position(n.Pos()), pkg.Name)
			case *ast.ChanType:
				t.Errorf("%s: channel type at %s; %s does no concurrency", name, fset.Position(n.Pos()), pkg.Name)
			case *ast.SelectorExpr:
				if id, ok := n.X.(*ast.Ident); ok && timeName != "" && id.Name == timeName && clockFuncs[n.Sel.Name] {
					t.Errorf("%s: time.%s at %s; %s takes time as an argument", name, n.Sel.Name, fset.Position(n.Pos()), pkg.Name)
				}
			}
			return true
		})
	}
}
