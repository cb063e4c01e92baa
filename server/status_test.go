package server

import (
	"context"
	"errors"
	"fmt"
	"go/ast"
	"go/parser"
	"go/token"
	"io"
	"log/slog"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// statusFile is the one file of the package that makes gRPC statuses.
const statusFile = "status.go"

// parsePackage parses the package's non-test files.
func parsePackage(t *testing.T) (*token.FileSet, map[string]*ast.File) {
	t.Helper()
	names, err := filepath.Glob("*.go")
	if err != nil {
		t.Fatal(err)
	}
	fset := token.NewFileSet()
	files := map[string]*ast.File{}
	for _, name := range names {
		if strings.HasSuffix(name, "_test.go") {
			continue
		}
		f, err := parser.ParseFile(fset, name, nil, 0)
		if err != nil {
			t.Fatal(err)
		}
		files[name] = f
	}
	if len(files) == 0 {
		t.Fatal("no Go files found")
	}
	return fset, files
}

// statusName returns the name a file imports google.golang.org/grpc/status
// under, or "".
func statusName(f *ast.File) string {
	for _, imp := range f.Imports {
		if path, _ := strconv.Unquote(imp.Path.Value); path == "google.golang.org/grpc/status" {
			if imp.Name != nil {
				return imp.Name.Name
			}
			return "status"
		}
	}
	return ""
}

// Every status the server returns is made by statusError (or, for a status
// without a reason, by the interceptors' backstop) in status.go, so every one
// carries its reason: no other file of the package calls or refers to
// status.Error, status.Errorf, status.New or status.Newf.
func TestStatusesMadeOnlyInStatusFile(t *testing.T) {
	fset, files := parsePackage(t)
	makers := []string{"Error", "Errorf", "New", "Newf", "FromProto", "ErrorProto"}
	for name, f := range files {
		if name == statusFile {
			continue
		}
		pkg := statusName(f)
		if pkg == "" {
			continue
		}
		ast.Inspect(f, func(n ast.Node) bool {
			sel, ok := n.(*ast.SelectorExpr)
			if !ok {
				return true
			}
			if x, ok := sel.X.(*ast.Ident); ok && x.Name == pkg && slices.Contains(makers, sel.Sel.Name) {
				t.Errorf("%s: %s.%s makes a status without a reason: use statusError (%s)", fset.Position(sel.Pos()), pkg, sel.Sel.Name, statusFile)
			}
			return true
		})
	}
}

// Every statusError call names a code (codes.X) and a reason constant of
// status.go, sends the reason with a code the table of reasons lists for it,
// and every reason of the table is sent somewhere.
func TestStatusErrorCallsFollowTheReasonTable(t *testing.T) {
	fset, files := parsePackage(t)
	consts := map[string]string{} // reason constant -> its value
	for _, d := range files[statusFile].Decls {
		g, ok := d.(*ast.GenDecl)
		if !ok || g.Tok != token.CONST {
			continue
		}
		for _, spec := range g.Specs {
			vs := spec.(*ast.ValueSpec)
			for i, id := range vs.Names {
				if lit, ok := vs.Values[i].(*ast.BasicLit); ok && strings.HasPrefix(id.Name, "reason") {
					consts[id.Name], _ = strconv.Unquote(lit.Value)
				}
			}
		}
	}
	if len(consts) != len(reasonCodes) {
		t.Errorf("status.go declares %d reason constants, the table of reasons lists %d", len(consts), len(reasonCodes))
	}
	codeOf := map[string]codes.Code{}
	for c := codes.OK; c <= codes.Unauthenticated; c++ {
		codeOf[c.String()] = c
	}
	sent := map[string]bool{}
	calls := 0
	for _, f := range files {
		ast.Inspect(f, func(n ast.Node) bool {
			call, ok := n.(*ast.CallExpr)
			if !ok {
				return true
			}
			if fn, ok := call.Fun.(*ast.Ident); !ok || fn.Name != "statusError" {
				return true
			}
			calls++
			at := fset.Position(call.Pos())
			if len(call.Args) != 5 {
				t.Errorf("%s: statusError with %d arguments", at, len(call.Args))
				return true
			}
			sel, ok := call.Args[0].(*ast.SelectorExpr)
			code, known := codes.Code(0), false
			if ok {
				code, known = codeOf[sel.Sel.Name]
			}
			if x, isIdent := sel.X.(*ast.Ident); !ok || !isIdent || x.Name != "codes" || !known {
				t.Errorf("%s: statusError's code must be a constant codes.X", at)
				return true
			}
			id, ok := call.Args[1].(*ast.Ident)
			reason, declared := "", false
			if ok {
				reason, declared = consts[id.Name]
			}
			if !declared {
				t.Errorf("%s: statusError's reason must be a reason constant of %s", at, statusFile)
				return true
			}
			sent[reason] = true
			if !slices.Contains(reasonCodes[reason], code) {
				t.Errorf("%s: reason %s sent with %v; the table of reasons lists %v", at, reason, code, reasonCodes[reason])
			}
			return true
		})
	}
	if calls == 0 {
		t.Fatal("no statusError call found")
	}
	for reason := range reasonCodes {
		if !sent[reason] {
			t.Errorf("reason %s is in the table of reasons but no statusError call sends it", reason)
		}
	}
}

// errorInfo returns the server's ErrorInfo detail of err, or nil.
func errorInfo(err error) *errdetails.ErrorInfo {
	st, _ := status.FromError(err)
	for _, d := range st.Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == errorDomain {
			return info
		}
	}
	return nil
}

// The interceptors' backstop gives a reason to a status that has none,
// maps a context's end to its code, and answers any other error with a
// generic Internal, keeping the text of the error out of the answer.
func TestDetailedGivesEveryErrorAReason(t *testing.T) {
	s := New(Options{Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	defer s.Close()
	ctx := context.Background()
	kept := statusError(codes.NotFound, reasonNoUser, "user_id", "", "no user u1")
	for _, tc := range []struct {
		name   string
		err    error
		code   codes.Code
		reason string
		msg    string
	}{
		{"a status with its reason", kept, codes.NotFound, reasonNoUser, "user_id: no user u1"},
		{"a status without one", status.Error(codes.Unimplemented, "method Frob not implemented"), codes.Unimplemented, "UNIMPLEMENTED", "method Frob not implemented"},
		{"a cancelled context", fmt.Errorf("load: %w", context.Canceled), codes.Canceled, reasonCancelled, "the call was cancelled"},
		{"a passed deadline", context.DeadlineExceeded, codes.DeadlineExceeded, reasonDeadlineExceeded, "the call's deadline passed"},
		{"any other error", errors.New("sqlite: table devices is locked by /srv/secret/path"), codes.Internal, reasonInternal, "internal error; the server logged the cause"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			err := s.detailed(ctx, tc.err)
			st, _ := status.FromError(err)
			if st.Code() != tc.code || st.Message() != tc.msg {
				t.Errorf("detailed(%v) = %v %q, want %v %q", tc.err, st.Code(), st.Message(), tc.code, tc.msg)
			}
			if info := errorInfo(err); info.GetReason() != tc.reason {
				t.Errorf("detailed(%v): reason %q, want %q", tc.err, info.GetReason(), tc.reason)
			}
		})
	}
	if s.detailed(ctx, nil) != nil {
		t.Error("detailed(nil) != nil")
	}
}

// statusError puts the field and the rule in the detail's metadata, and
// the field (or without one the rule) before the message.
func TestStatusErrorNamesFieldAndRule(t *testing.T) {
	for _, tc := range []struct {
		field, rule, msg string
		meta             map[string]string
	}{
		{"valid_seconds", "", "valid_seconds: must be from 1 to 604800", map[string]string{"field": "valid_seconds"}},
		{"", "server_admin", "server_admin: must be from 1 to 604800", map[string]string{"rule": "server_admin"}},
		{"device_name", "no_control_characters", "device_name: must be from 1 to 604800", map[string]string{"field": "device_name", "rule": "no_control_characters"}},
		{"", "", "must be from 1 to 604800", nil},
	} {
		err := statusError(codes.InvalidArgument, reasonInvalidArgument, tc.field, tc.rule, "must be from 1 to 604800")
		info := errorInfo(err)
		if info.GetReason() != reasonInvalidArgument || len(info.GetMetadata()) != len(tc.meta) {
			t.Errorf("field %q rule %q: detail %v, want reason %s and metadata %v", tc.field, tc.rule, info, reasonInvalidArgument, tc.meta)
		}
		for k, v := range tc.meta {
			if info.GetMetadata()[k] != v {
				t.Errorf("field %q rule %q: metadata %s = %q, want %q", tc.field, tc.rule, k, info.GetMetadata()[k], v)
			}
		}
		if got := status.Convert(err).Message(); got != tc.msg {
			t.Errorf("field %q rule %q: message %q, want %q", tc.field, tc.rule, got, tc.msg)
		}
	}
}
