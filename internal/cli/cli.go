package cli

import (
	"cmp"
	"context"
	"errors"
	"io"

	"github.com/spf13/cobra"

	"tamp/client"
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

// plain makes an error fit for a person to read: a server's refusal reads
// as the server's message and its reason in brackets (client.ServerError),
// control characters are escaped (the message may quote what a user or a
// server wrote), and a line of advice follows a server certificate that
// failed verification or a refusal the user can act on. The original error
// stays reachable for errors.Is and errors.As.
func plain(err error) error {
	if err == nil {
		return nil
	}
	msg := escape(err.Error())
	if se, ok := err.(*shownError); ok { // tamp's own words, with the values in them escaped
		msg = se.msg
	}
	if advice := cmp.Or(certificateAdvice(err), refusalAdvice(err)); advice != "" {
		msg += "\n" + advice
	}
	if msg == err.Error() {
		return err
	}
	return &plainError{msg: msg, err: err}
}

// certificateAdvice says what to do about a server certificate that failed
// verification, or returns "" for any other error.
func certificateAdvice(err error) string {
	var ce *client.CertificateError
	if !errors.As(err, &ce) {
		return ""
	}
	switch ce.Problem {
	case client.CertificateUnknownAuthority:
		return "The server's certificate is not signed by an authority this device trusts. If the server uses its own\n" +
			"certificate authority, give that authority's certificate with --ca FILE (tamp enroll keeps it for later commands)."
	case client.CertificateNameMismatch:
		return "The server's certificate is not issued for the address dialed. Give --server the name or address the\n" +
			"certificate lists, or ask the server's operator for a certificate that lists this one."
	case client.CertificateExpired:
		return "The server's certificate has expired or is not valid yet. Check this device's date and time, or ask the\n" +
			"server's operator to renew the certificate."
	}
	return "Ask the server's operator to check the server's certificate."
}

// refusalAdvice says what to do about a server's refusal the user can act
// on, by its reason, or returns "" for any other error.
func refusalAdvice(err error) string {
	var se *client.ServerError
	if !errors.As(err, &se) {
		return ""
	}
	switch {
	case errors.Is(se, client.ErrRevoked):
		return "This device was revoked. Ask an administrator for a new enrolment code and run tamp enroll again: the\n" +
			"entries it holds that never reached the server are kept and signed again."
	case errors.Is(se, client.ErrCodeInvalid):
		return "A code enrols one device, once, before it expires. Ask an administrator for a new one (tamp admin issue-code)."
	case errors.Is(se, client.ErrNotMember):
		return "Ask an administrator of the project to add you (tamp admin add-member), or check --project."
	case errors.Is(se, client.ErrServerStorage):
		return "The server cannot store data now; nothing was lost on this device. Try again later, and tell the\n" +
			"server's operator."
	case errors.Is(se, client.ErrRateLimited):
		return "Wait a few seconds and try again."
	}
	return ""
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

Every command that keeps records works on this device's store: --store FILE,
else the file named by the TAMP_STORE environment variable, else
tamp/device.db in the user's configuration directory. --project chooses the
project by name (remembered; tamp project use sets it); --units us|si shows
and takes values in US customary or SI units (default: the project's); read
commands print JSON with --json.

Results support, and never replace, review by qualified personnel; the project's
specifications and local codes govern every acceptance limit.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.AddGroup(&cobra.Group{ID: "setup", Title: "Set-up:"}, &cobra.Group{ID: "field", Title: "In the field:"},
		&cobra.Group{ID: "office", Title: "In the office:"}, &cobra.Group{ID: "qa", Title: "Quality assurance:"},
		&cobra.Group{ID: "device", Title: "This device, its server and the record:"})
	for _, g := range []struct {
		id   string
		cmds []*cobra.Command
	}{
		{"setup", []*cobra.Command{newProject(), newSpec(), newReference(), newEquipment(), newBorrow(), newAdmin(), newEnroll()}},
		{"field", []*cobra.Command{newTest(), newCalc()}},
		{"office", []*cobra.Command{newPlacement(), newHaul(), newReview(), newWeb()}},
		{"qa", []*cobra.Command{newQA(), newExport(), newVerify()}},
		{"device", []*cobra.Command{newSync(), newStatus()}},
	} {
		for _, c := range g.cmds {
			c.GroupID = g.id
			root.AddCommand(c)
		}
	}
	root.AddCommand(newDemo())
	return root
}
