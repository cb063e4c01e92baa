package cli

import (
	"fmt"
	"os"

	"github.com/spf13/cobra"

	"tamp/client"
)

func newExport() *cobra.Command {
	var f projectFlags
	var out string
	c := &cobra.Command{
		Use:     "export",
		Short:   "Write a project's signed ledger to a file, for offline verification and archiving",
		Example: `  tamp export --project "Cinder Butte interchange" --out cinder-butte.tamp`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if out == "" {
				return failf("--out: name the file to write the ledger to, e.g. --out project.tamp")
			}
			ctx := cmd.Context()
			s, cc, done, err := f.connect(ctx)
			if err != nil {
				return err
			}
			defer done()
			ss, err := f.session(ctx, s)
			if err != nil {
				return err
			}
			file, err := os.Create(out)
			if err != nil {
				return fmt.Errorf("--out: %w", err)
			}
			n, err := s.Export(ctx, cc, ss.project, file)
			if cerr := file.Close(); err == nil {
				err = cerr
			}
			if err != nil {
				return err
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "%d events of project %s written to %s; check it with tamp verify %s\n", n, quoted(ss.projectName()),
				escape(out), escape(out))
			return err
		},
	}
	f.register(c)
	c.Flags().StringVar(&out, "out", "", "the file to write")
	return c
}

func newVerify() *cobra.Command {
	return &cobra.Command{
		Use:   "verify FILE",
		Short: "Check an exported ledger offline: signatures, rules and the unbroken hash chain",
		Long: `Check an exported ledger with no server: every event decodes, is signed by its
device's key and obeys the rules, and the hash chain runs unbroken from the
project's start. It prints the head hash, which anyone holding the same ledger
can compare.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			file, err := os.Open(args[0])
			if err != nil {
				return err
			}
			defer file.Close()
			rep, err := client.VerifyExport(file)
			if err != nil {
				return err
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "ok: project %s, %d events, %d tests; head %d %s\n",
				escape(rep.Project), rep.Events, rep.Tests, rep.Head.Seq, rep.Head.Hash)
			return err
		},
	}
}
