package main

import (
	"go/ast"
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"strings"
	"testing"
)

// TestExportedIdentifiersDocumented checks the project rule that every
// exported identifier of the module's packages has a doc comment (the
// convention of the Go standard library; see "Go Doc Comments",
// go.dev/doc/comment). A name declared in a documented group (a const or
// var block with a comment) counts as documented.
func TestExportedIdentifiersDocumented(t *testing.T) {
	var missing []string
	root := filepath.Join("..", "..")
	for _, top := range []string{"pkg", "api", "web", "cmd"} {
		err := filepath.WalkDir(filepath.Join(root, top), func(path string, d fs.DirEntry, err error) error {
			if err != nil {
				return err
			}
			if d.IsDir() || !strings.HasSuffix(path, ".go") || strings.HasSuffix(path, "_test.go") {
				return nil
			}
			fset := token.NewFileSet()
			f, err := parser.ParseFile(fset, path, nil, parser.ParseComments)
			if err != nil {
				return err
			}
			if f.Name.Name == "main" {
				return nil
			}
			report := func(pos token.Pos, name string) {
				missing = append(missing, fset.Position(pos).String()+": "+name)
			}
			for _, decl := range f.Decls {
				switch d := decl.(type) {
				case *ast.FuncDecl:
					if d.Name.IsExported() && d.Doc == nil && exportedRecv(d) {
						report(d.Pos(), d.Name.Name)
					}
				case *ast.GenDecl:
					for _, spec := range d.Specs {
						switch s := spec.(type) {
						case *ast.TypeSpec:
							if s.Name.IsExported() && s.Doc == nil && d.Doc == nil {
								report(s.Pos(), s.Name.Name)
							}
						case *ast.ValueSpec:
							for _, n := range s.Names {
								if n.IsExported() && s.Doc == nil && d.Doc == nil && s.Comment == nil {
									report(n.Pos(), n.Name)
								}
							}
						}
					}
				}
			}
			return nil
		})
		if err != nil {
			t.Fatal(err)
		}
	}
	for _, m := range missing {
		t.Errorf("exported identifier without a doc comment: %s", m)
	}
}

// exportedRecv reports whether a method's receiver type is exported (a
// method of an unexported type is not part of the package's API); plain
// functions count as exported.
func exportedRecv(d *ast.FuncDecl) bool {
	if d.Recv == nil || len(d.Recv.List) == 0 {
		return true
	}
	t := d.Recv.List[0].Type
	if s, ok := t.(*ast.StarExpr); ok {
		t = s.X
	}
	if g, ok := t.(*ast.IndexExpr); ok {
		t = g.X
	}
	if id, ok := t.(*ast.Ident); ok {
		return id.IsExported()
	}
	return true
}
