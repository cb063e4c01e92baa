package layering

import (
	"bufio"
	"fmt"
	"go/ast"
	"go/importer"
	"go/parser"
	"go/token"
	"go/types"
	"io"
	"os"
	"os/exec"
	"sort"
	"strings"
	"testing"
)

// The public packages are every package of the module outside internal/
// and cmd/. An app in another module can import them, and must be able to
// name every type they hand it or take from it, so no exported identifier
// of theirs may name a type of an internal package (of this module or any
// other), aliases included.

func TestPublicAPINamesNoInternalType(t *testing.T) {
	if _, err := exec.LookPath("go"); err != nil {
		t.Skip("go command not found")
	}
	public := publicPackages(t)
	if len(public) == 0 {
		t.Fatal("go list found no public package")
	}
	imp := exportImporter(t, public)
	var found []string
	for _, path := range public {
		pkg, err := imp.Import(path)
		if err != nil {
			t.Fatalf("import %s from its export data: %v", path, err)
		}
		found = append(found, internalRefs(pkg)...)
	}
	if len(found) > 0 {
		t.Errorf("the public API names %d types of internal packages, which an app outside the module cannot name:\n\t%s",
			len(found), strings.Join(found, "\n\t"))
	}
}

// TestAPIWalkFindsEveryKindOfReference checks the walk itself on a package
// that reaches an internal type in every way an API can.
func TestAPIWalkFindsEveryKindOfReference(t *testing.T) {
	const secret = `package secret
type Hash [32]byte
type Kind string
const K Kind = "k"
type Thing struct{ X int }
type Lister interface{ List() []Thing }
type Number interface{ ~int | ~float64 }
type Box[T any] struct{ V T }`
	// lib is another module's public package, whose exported alias of its
	// internal type is a name an app can use.
	const lib = `package lib
import "example.test/internal/secret"
type Status = secret.Thing`
	const pub = `package pub
import (
	"example.test/internal/secret"
	"example.test/lib"
)
type (
	hiddenAlias = secret.Thing
	ThroughHidden struct{ F hiddenAlias }        // an unexported alias
	ThroughLib struct{ S *lib.Status }           // an exported alias elsewhere: fine
	Alias = secret.Hash                          // alias
	AliasOfSlice = []secret.Thing                // alias of a composite
	Field struct{ H secret.Hash; ok secret.Hash } // exported field (the unexported one is fine)
	Embedded struct{ secret.Thing }              // embedded field
	inner struct{ P *secret.Thing }
	Promoted struct{ inner }                     // field promoted from an unexported embedded struct
	Param func(secret.Kind)                      // func parameter
	Result func() (int, error, secret.Hash)      // func result
	MapKey map[secret.Kind]int                   // map key
	MapElem map[string]*secret.Thing             // map element through a pointer
	Chan chan<- secret.Hash                      // channel element
	Array [2]secret.Hash                         // array element
	Iface interface{ Get() secret.Thing }         // interface method
	EmbIface interface{ secret.Lister }           // embedded interface
	Constraint[T secret.Number] struct{ V T }     // generic constraint
	Union interface{ ~int | secret.Kind }         // union term
	Inst struct{ B secret.Box[int] }              // generic instance
	Arg struct{ B Generic[secret.Kind] }          // type argument
	Generic[T any] struct{ V T }
	Clean struct{ N int; s secret.Hash }
)
type Method struct{}
func (Method) Hash() secret.Hash { return secret.Hash{} }
func (*Method) Set(secret.Hash) {}
func (Method) quiet(secret.Hash) {}
type hidden struct{}
func (hidden) Leak() secret.Thing { return secret.Thing{} }
func Returns() hidden { return hidden{} }                       // an unexported type's exported method
func GenericFunc[T secret.Number](v T) T { return v }            // generic constraint of a func
var V secret.Thing
const C = secret.K
const Untyped = 3
func Fine(n int, s string) error { return nil }`
	fset := token.NewFileSet()
	check := func(path, src string, imp types.Importer) *types.Package {
		f, err := parser.ParseFile(fset, path+".go", src, 0)
		if err != nil {
			t.Fatalf("parse %s: %v", path, err)
		}
		pkg, err := (&types.Config{Importer: imp}).Check(path, fset, []*ast.File{f}, nil)
		if err != nil {
			t.Fatalf("check %s: %v", path, err)
		}
		return pkg
	}
	pkgs := map[string]*types.Package{}
	imp := importerFunc(func(path string) (*types.Package, error) {
		if p, ok := pkgs[path]; ok {
			return p, nil
		}
		return nil, fmt.Errorf("no package %s", path)
	})
	for _, p := range []struct{ path, src string }{{"example.test/internal/secret", secret}, {"example.test/lib", lib}} {
		pkgs[p.path] = check(p.path, p.src, imp)
	}
	p := check("example.test/pub", pub, imp)
	got := map[string]bool{}
	for _, f := range internalRefs(p) {
		got[strings.Fields(f)[0]] = true
	}
	want := []string{
		"pub.Alias", "pub.AliasOfSlice", "pub.Field.H", "pub.Embedded.Thing", "pub.Promoted.P",
		"pub.Param", "pub.Result", "pub.MapKey", "pub.MapElem", "pub.Chan", "pub.Array",
		"pub.Iface.Get", "pub.EmbIface", "pub.EmbIface.List", "pub.Constraint", "pub.Union",
		"pub.Inst.B", "pub.Arg.B", "pub.Method.Hash", "pub.Method.Set", "pub.Returns.Leak",
		"pub.GenericFunc", "pub.V", "pub.C", "pub.ThroughHidden.F",
	}
	for _, w := range want {
		if !got[w] {
			t.Errorf("the walk missed %s", w)
		}
		delete(got, w)
	}
	for g := range got {
		t.Errorf("the walk reported %s, which names no internal type", g)
	}
}

type importerFunc func(path string) (*types.Package, error)

func (f importerFunc) Import(path string) (*types.Package, error) { return f(path) }

// publicPackages lists the module's packages outside internal/ and cmd/,
// leaving out any with no files but tests and any whose files are all
// generated.
func publicPackages(t *testing.T) []string {
	t.Helper()
	out, err := exec.Command("go", "list", "-f", "{{.ImportPath}}\t{{.Dir}}\t{{join .GoFiles \" \"}}", "tamp/...").Output()
	if err != nil {
		t.Fatalf("go list tamp/...: %v\n%s", err, stderrOf(err))
	}
	var public []string
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		path, rest, _ := strings.Cut(line, "\t")
		dir, files, _ := strings.Cut(rest, "\t")
		if isInternalPath(path) || path == "tamp/cmd" || strings.HasPrefix(path, "tamp/cmd/") {
			continue
		}
		// A directory of tests alone has no API; generated code is not
		// written to be imported.
		if fs := strings.Fields(files); len(fs) == 0 || allGenerated(t, dir, fs) {
			continue
		}
		public = append(public, path)
	}
	return public
}

func allGenerated(t *testing.T, dir string, files []string) bool {
	t.Helper()
	for _, name := range files {
		f, err := os.Open(dir + "/" + name)
		if err != nil {
			t.Fatal(err)
		}
		generated := false
		sc := bufio.NewScanner(f)
		for sc.Scan() {
			line := sc.Text()
			if strings.HasPrefix(line, "package ") {
				break
			}
			if strings.HasPrefix(line, "// Code generated ") && strings.HasSuffix(line, " DO NOT EDIT.") {
				generated = true
				break
			}
		}
		f.Close()
		if !generated {
			return false
		}
	}
	return true
}

// exportImporter imports packages from the export data the go command
// builds for pkgs and their dependencies.
func exportImporter(t *testing.T, pkgs []string) types.Importer {
	t.Helper()
	args := append([]string{"list", "-export", "-deps", "-f", "{{.ImportPath}}\t{{.Export}}"}, pkgs...)
	out, err := exec.Command("go", args...).Output()
	if err != nil {
		t.Fatalf("go list -export: %v\n%s", err, stderrOf(err))
	}
	export := map[string]string{}
	for _, line := range strings.Split(strings.TrimSpace(string(out)), "\n") {
		path, file, _ := strings.Cut(line, "\t")
		export[path] = file
	}
	return importer.ForCompiler(token.NewFileSet(), "gc", func(path string) (io.ReadCloser, error) {
		file := export[path]
		if file == "" {
			return nil, fmt.Errorf("no export data for %s", path)
		}
		return os.Open(file)
	})
}

func stderrOf(err error) []byte {
	if ee, ok := err.(*exec.ExitError); ok {
		return ee.Stderr
	}
	return nil
}

// isInternalPath reports whether Go lets only the packages under the
// parent of an "internal" element import path.
func isInternalPath(path string) bool {
	return path == "internal" || strings.HasPrefix(path, "internal/") ||
		strings.HasSuffix(path, "/internal") || strings.Contains(path, "/internal/")
}

// internalRefs walks every exported identifier of pkg (types with their
// exported fields, promoted fields and methods, funcs, vars and consts) and
// returns a line for each reference to a type declared in an internal
// package: where it is, and the type.
func internalRefs(pkg *types.Package) []string {
	w := &apiWalk{pkg: pkg, found: map[string]bool{}}
	scope := pkg.Scope()
	for _, name := range scope.Names() {
		obj := scope.Lookup(name)
		if !obj.Exported() {
			continue
		}
		where := pkg.Name() + "." + name
		switch obj := obj.(type) {
		case *types.TypeName:
			switch t := obj.Type().(type) {
			case *types.Named:
				w.named(where, t)
			case *types.Alias:
				w.typeParams(where, t.TypeParams())
				w.typ(where, t.Rhs())
			default:
				w.typ(where, t)
			}
		default:
			w.typ(where, obj.Type())
		}
	}
	var lines []string
	for f := range w.found {
		lines = append(lines, f)
	}
	sort.Strings(lines)
	return lines
}

type apiWalk struct {
	pkg   *types.Package
	found map[string]bool
	// inside holds the named types being walked, against cycles.
	inside []*types.Named
}

func (w *apiWalk) report(where string, obj types.Object) {
	w.found[fmt.Sprintf("%s names %s.%s", where, obj.Pkg().Path(), obj.Name())] = true
}

// named walks a named type of the package declared at where: its type
// parameters, its underlying type and its method set (with the methods
// promoted through embedded fields).
func (w *apiWalk) named(where string, n *types.Named) {
	for _, m := range w.inside {
		if m == n {
			return
		}
	}
	w.inside = append(w.inside, n)
	defer func() { w.inside = w.inside[:len(w.inside)-1] }()
	w.typeParams(where, n.TypeParams())
	w.typ(where, n.Underlying())
	var set *types.MethodSet
	if types.IsInterface(n) {
		set = types.NewMethodSet(n)
	} else {
		set = types.NewMethodSet(types.NewPointer(n))
	}
	for sel := range set.Methods() {
		if sel.Obj().Exported() {
			w.typ(where+"."+sel.Obj().Name(), sel.Type())
		}
	}
}

func (w *apiWalk) typeParams(where string, tps *types.TypeParamList) {
	for tp := range tps.TypeParams() {
		w.typ(where, tp.Constraint())
	}
}

func (w *apiWalk) typ(where string, t types.Type) {
	switch t := t.(type) {
	case *types.Basic, nil:
	case *types.Pointer:
		w.typ(where, t.Elem())
	case *types.Slice:
		w.typ(where, t.Elem())
	case *types.Array:
		w.typ(where, t.Elem())
	case *types.Chan:
		w.typ(where, t.Elem())
	case *types.Map:
		w.typ(where, t.Key())
		w.typ(where, t.Elem())
	case *types.Signature:
		w.typeParams(where, t.TypeParams())
		for v := range t.Params().Variables() {
			w.typ(where, v.Type())
		}
		for v := range t.Results().Variables() {
			w.typ(where, v.Type())
		}
	case *types.Tuple:
		for v := range t.Variables() {
			w.typ(where, v.Type())
		}
	case *types.Struct:
		for f := range t.Fields() {
			switch {
			case f.Exported():
				w.typ(where+"."+f.Name(), f.Type())
			case f.Embedded():
				// The exported fields of an unexported embedded struct
				// are promoted (its methods come with the method set).
				w.promoted(where, f.Type())
			}
		}
	case *types.Interface:
		for m := range t.ExplicitMethods() {
			if m.Exported() {
				w.typ(where+"."+m.Name(), m.Type())
			}
		}
		for e := range t.EmbeddedTypes() {
			w.typ(where, e)
		}
	case *types.Union:
		for i := range t.Len() {
			w.typ(where, t.Term(i).Type())
		}
	case *types.TypeParam:
		// Its constraint is walked where the parameter is declared.
	case *types.Alias:
		obj := t.Obj()
		if obj.Pkg() != nil && isInternalPath(obj.Pkg().Path()) {
			w.report(where, obj)
			return
		}
		for a := range t.TypeArgs().Types() {
			w.typ(where, a)
		}
		// An exported alias is a name an app can use (status.Status of
		// grpc aliases a type of grpc's internal packages); this
		// package's own are walked where they are declared. An
		// unexported one stands for what it aliases.
		if !obj.Exported() {
			w.typ(where, t.Rhs())
		}
	case *types.Named:
		obj := t.Obj()
		if obj.Pkg() != nil && isInternalPath(obj.Pkg().Path()) {
			w.report(where, obj)
			return
		}
		for a := range t.TypeArgs().Types() {
			w.typ(where, a)
		}
		// An unexported type of the package is walked here: an app
		// cannot name it, but reaches its exported fields and methods.
		// Exported types of the package are walked where they are
		// declared; other public packages' types are not ours to walk.
		if obj.Pkg() == w.pkg && !obj.Exported() {
			w.named(where, t.Origin())
		}
	default:
		panic(fmt.Sprintf("apiWalk: unexpected type %T at %s", t, where))
	}
}

// promoted walks the exported fields of an unexported embedded field's
// struct, which its embedding struct promotes.
func (w *apiWalk) promoted(where string, t types.Type) {
	if p, ok := t.(*types.Pointer); ok {
		t = p.Elem()
	}
	if n, ok := types.Unalias(t).(*types.Named); ok {
		for _, m := range w.inside {
			if m == n {
				return
			}
		}
		w.inside = append(w.inside, n)
		defer func() { w.inside = w.inside[:len(w.inside)-1] }()
	}
	if s, ok := t.Underlying().(*types.Struct); ok {
		w.typ(where, s)
	}
}
