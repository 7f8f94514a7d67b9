// Command keydoc writes the README's table of run-file keys from the config
// structs themselves: the key from each field's toml tag, the default from
// configs.Default(), the meaning from the field's doc comment. It rewrites
// the part of the file between the markers
//
//	<!-- keys:begin -->
//	<!-- keys:end -->
//
// so the table cannot drift from the code. Usage: go run ./configs/keydoc -w README.md
// (without -w it prints the table; -check exits 1 when the file is stale).
package main

import (
	"bytes"
	"flag"
	"fmt"
	"go/ast"
	"go/parser"
	"go/token"
	"os"
	"path/filepath"
	"reflect"
	"strings"

	toml "github.com/pelletier/go-toml/v2"

	"weft/configs"
)

const (
	beginMarker = "<!-- keys:begin -->"
	endMarker   = "<!-- keys:end -->"
	modulePath  = "weft"
)

func main() {
	write := flag.String("w", "", "rewrite the key table in this file")
	check := flag.String("check", "", "exit 1 when the key table in this file is stale")
	flag.Parse()
	root, err := moduleRoot()
	if err != nil {
		fail(err)
	}
	table, err := Table(root)
	if err != nil {
		fail(err)
	}
	switch {
	case *write != "":
		if err := rewrite(*write, table); err != nil {
			fail(err)
		}
	case *check != "":
		cur, err := os.ReadFile(*check)
		if err != nil {
			fail(err)
		}
		want, err := splice(cur, table)
		if err != nil {
			fail(fmt.Errorf("%s: %w", *check, err))
		}
		if !bytes.Equal(cur, want) {
			fail(fmt.Errorf("%s: key table is stale; run make docs", *check))
		}
	default:
		fmt.Print(table)
	}
}

func fail(err error) {
	fmt.Fprintln(os.Stderr, "keydoc:", err)
	os.Exit(1)
}

func moduleRoot() (string, error) {
	wd, err := os.Getwd()
	if err != nil {
		return "", err
	}
	for d := wd; ; d = filepath.Dir(d) {
		if _, err := os.Stat(filepath.Join(d, "go.mod")); err == nil {
			return d, nil
		}
		if filepath.Dir(d) == d {
			return "", fmt.Errorf("no go.mod above %s", wd)
		}
	}
}

// Table renders the Markdown table of every run-file key, one section after
// another in the order of configs.Run.
func Table(root string) (string, error) {
	docs := map[string]string{} // "pkgpath.Type.Field" -> doc
	parsed := map[string]bool{}
	var b strings.Builder
	def := configs.Default()
	rv := reflect.ValueOf(def)
	rt := rv.Type()
	for i := 0; i < rt.NumField(); i++ {
		sf := rt.Field(i)
		section := strings.Split(sf.Tag.Get("toml"), ",")[0]
		fmt.Fprintf(&b, "\n**[%s]**\n\n| key | type | default | meaning |\n|---|---|---|---|\n", section)
		err := fields(&b, rv.Field(i), section, docs, parsed, root)
		if err != nil {
			return "", err
		}
	}
	return b.String(), nil
}

func fields(b *strings.Builder, v reflect.Value, section string, docs map[string]string, parsed map[string]bool, root string) error {
	t := v.Type()
	if err := loadDocs(t.PkgPath(), root, docs, parsed); err != nil {
		return err
	}
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		if f.Anonymous && f.Type.Kind() == reflect.Struct {
			if err := fields(b, v.Field(i), section, docs, parsed, root); err != nil {
				return err
			}
			continue
		}
		name := strings.Split(f.Tag.Get("toml"), ",")[0]
		if name == "" || name == "-" {
			continue
		}
		doc := docs[t.PkgPath()+"."+t.Name()+"."+f.Name]
		if doc == "" {
			return fmt.Errorf("%s.%s (%s.%s) has no doc comment", section, name, t.Name(), f.Name)
		}
		fmt.Fprintf(b, "| `%s.%s` | %s | %s | %s |\n", section, name, typeWord(f.Type), defaultText(v.Field(i)), escape(doc))
	}
	return nil
}

func loadDocs(pkgPath, root string, docs map[string]string, parsed map[string]bool) error {
	if parsed[pkgPath] {
		return nil
	}
	parsed[pkgPath] = true
	rel := strings.TrimPrefix(strings.TrimPrefix(pkgPath, modulePath), "/")
	dir := filepath.Join(root, filepath.FromSlash(rel))
	fset := token.NewFileSet()
	files, err := filepath.Glob(filepath.Join(dir, "*.go"))
	if err != nil {
		return err
	}
	for _, path := range files {
		if strings.HasSuffix(path, "_test.go") {
			continue
		}
		f, err := parser.ParseFile(fset, path, nil, parser.ParseComments)
		if err != nil {
			return err
		}
		for _, decl := range f.Decls {
			gd, ok := decl.(*ast.GenDecl)
			if !ok || gd.Tok != token.TYPE {
				continue
			}
			for _, spec := range gd.Specs {
				ts := spec.(*ast.TypeSpec)
				st, ok := ts.Type.(*ast.StructType)
				if !ok {
					continue
				}
				for _, fl := range st.Fields.List {
					if fl.Doc == nil {
						continue
					}
					text := strings.Join(strings.Fields(fl.Doc.Text()), " ")
					for _, n := range fl.Names {
						// Drop the leading field name: "Layers is the number" -> "The number".
						d := strings.TrimPrefix(text, n.Name+" ")
						d = strings.TrimPrefix(d, "is ")
						d = strings.TrimPrefix(d, "are ")
						if d != "" {
							d = strings.ToUpper(d[:1]) + d[1:]
						}
						docs[pkgPath+"."+ts.Name.Name+"."+n.Name] = d
					}
				}
			}
		}
	}
	return nil
}

func typeWord(t reflect.Type) string {
	switch t.Kind() {
	case reflect.String:
		return "string"
	case reflect.Bool:
		return "bool"
	case reflect.Int, reflect.Int8, reflect.Int16, reflect.Int32, reflect.Int64,
		reflect.Uint, reflect.Uint8, reflect.Uint16, reflect.Uint32, reflect.Uint64:
		return "integer"
	case reflect.Float32, reflect.Float64:
		return "number"
	case reflect.Slice:
		return "list of " + typeWord(t.Elem())
	}
	return t.String()
}

func defaultText(v reflect.Value) string {
	b, err := toml.Marshal(map[string]any{"x": v.Interface()})
	if err != nil {
		return "?"
	}
	s := strings.TrimSpace(strings.TrimPrefix(string(b), "x = "))
	return "`" + s + "`"
}

func escape(s string) string { return strings.ReplaceAll(s, "|", `\|`) }

func splice(cur []byte, table string) ([]byte, error) {
	i := bytes.Index(cur, []byte(beginMarker))
	j := bytes.Index(cur, []byte(endMarker))
	if i < 0 || j < i {
		return nil, fmt.Errorf("markers %s and %s not found", beginMarker, endMarker)
	}
	var out bytes.Buffer
	out.Write(cur[:i+len(beginMarker)])
	out.WriteString("\n")
	out.WriteString(table)
	out.WriteString("\n")
	out.Write(cur[j:])
	return out.Bytes(), nil
}

func rewrite(path, table string) error {
	cur, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	out, err := splice(cur, table)
	if err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	if bytes.Equal(out, cur) {
		return nil
	}
	return os.WriteFile(path, out, 0o644)
}
