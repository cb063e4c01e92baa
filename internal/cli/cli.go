package cli

import (
	"context"
	"io"
	"regexp"

	"github.com/spf13/cobra"
)

// Run executes the tamp command line with args (without the program name),
// writing results to stdout and diagnostics to stderr. It returns the error
// that ended the command; the caller prints it and exits non-zero.
func Run(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	root := newRoot()
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	return plain(root.ExecuteContext(ctx))
}

var rpcPrefix = regexp.MustCompile(`rpc error: code = (\w+) desc = `)

// plain rewrites gRPC's "rpc error: code = X desc = " into words a person
// reads: the server's message, then its code in brackets. The original
// error stays reachable for errors.Is.
func plain(err error) error {
	if err == nil {
		return nil
	}
	msg := err.Error()
	m := rpcPrefix.FindStringSubmatch(msg)
	if m == nil {
		return err
	}
	return &plainError{msg: rpcPrefix.ReplaceAllString(msg, "") + " [" + m[1] + "]", err: err}
}

type plainError struct {
	msg string
	err error
}

func (p *plainError) Error() string { return p.msg }
func (p *plainError) Unwrap() error { return p.err }
func newRoot() *cobra.Command {
	root := &cobra.Command{
		Use:   "tamp",
		Short: "Field density quality control for earthwork",
		Long: `tamp records in-place density tests of compacted fill, grades them against their
laboratory reference and specification, and keeps the project's record.

Results support, and never replace, review by qualified personnel; the project's
specifications and local codes govern every acceptance limit.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.AddCommand(newCalc(), newEnroll(), newSync(), newAdmin(), newExport(), newVerify(), newStatus())
	return root
}
