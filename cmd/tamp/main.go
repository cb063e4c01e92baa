// Command tamp is the field and office tool of tamp; see package
// tamp/internal/cli for its commands.
package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"syscall"

	"tamp/internal/cli"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := cli.Run(ctx, os.Args[1:], os.Stdout, os.Stderr)
	stop()
	if err != nil {
		fmt.Fprintln(os.Stderr, "tamp:", err)
		os.Exit(1)
	}
}
