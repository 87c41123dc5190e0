package main

import (
	"context"
	"fmt"
	"io"
)

// TEMPORARY: replaced by the command's implementation.
func runDemo(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	fmt.Fprintln(stderr, "etpulse: not implemented yet")
	return exitError
}
