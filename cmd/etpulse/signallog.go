package main

import (
	"context"
	"fmt"
	"io"
	"log/slog"
	"sync"
)

// signalNotices says what a signal does (shutting down, forced exit): as
// plain text on stderr, or through the command's logger once it has one,
// so a JSON log stream stays JSON to its last line.
type signalNotices struct {
	stderr io.Writer

	mu  sync.Mutex
	log *slog.Logger
}

type signalNoticesKey struct{}

// withSignalNotices returns ctx carrying n (see logSignalNotices).
func withSignalNotices(ctx context.Context, n *signalNotices) context.Context {
	return context.WithValue(ctx, signalNoticesKey{}, n)
}

// logSignalNotices sends the signal notices of ctx's command through log.
func logSignalNotices(ctx context.Context, log *slog.Logger) {
	if n, ok := ctx.Value(signalNoticesKey{}).(*signalNotices); ok {
		n.mu.Lock()
		defer n.mu.Unlock()
		n.log = log
	}
}

// say writes msg as a log line (warn level when warn) or on stderr.
func (n *signalNotices) say(msg string, warn bool) {
	n.mu.Lock()
	log := n.log
	n.mu.Unlock()
	switch {
	case log == nil:
		fmt.Fprintln(n.stderr, "etpulse: "+msg)
	case warn:
		log.Warn(msg)
	default:
		log.Info(msg)
	}
}
