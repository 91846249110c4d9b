// Command gliss is the command-line client of the gliss daemon and of its
// dot model. All commands live in package client/cli.
package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"syscall"

	"github.com/gliss-lab/gliss/client/cli"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := cli.Run(ctx, &cli.Env{Stdout: os.Stdout, Stderr: os.Stderr, Stdin: os.Stdin}, os.Args[1:])
	stop()
	if err != nil && cli.ExitCode(err) != 0 {
		fmt.Fprintln(os.Stderr, err)
	}
	os.Exit(cli.ExitCode(err))
}
