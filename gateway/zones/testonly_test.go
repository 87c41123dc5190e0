package zones

import (
	"go/ast"
	"go/parser"
	"go/token"
	"path/filepath"
	"strings"
	"testing"
)

// TestValveSimulatorIsTestOnly keeps the simulated valve controller out of
// the shipped package: only the tests of this package use it, so it lives
// in a _test.go file.
func TestValveSimulatorIsTestOnly(t *testing.T) {
	files, err := filepath.Glob("*.go")
	if err != nil {
		t.Fatalf("list the package's files: %v", err)
	}
	fset := token.NewFileSet()
	for _, name := range files {
		if strings.HasSuffix(name, "_test.go") {
			continue
		}
		f, err := parser.ParseFile(fset, name, nil, parser.SkipObjectResolution)
		if err != nil {
			t.Fatalf("parse %s: %v", name, err)
		}
		for _, d := range f.Decls {
			g, ok := d.(*ast.GenDecl)
			if !ok || g.Tok != token.TYPE {
				continue
			}
			for _, s := range g.Specs {
				if n := s.(*ast.TypeSpec).Name.Name; n == "ValveSimulator" || n == "Behaviour" {
					t.Errorf("%s declares %s, which only tests use; keep it in a _test.go file", name, n)
				}
			}
		}
	}
}
