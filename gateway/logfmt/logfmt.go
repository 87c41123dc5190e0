// Package logfmt holds the gateway's log handler options: the same
// rendering of values in the text and JSON formats.
package logfmt

import (
	"log/slog"

	"etpulse/gateway/internal/precision"
)

// Options returns handler options at level that write every duration
// attribute as a short Go duration string ("7.9ms", "1m30s"; see
// precision.Duration), in JSON as in text, instead of a nanosecond count
// or 7.903066ms.
func Options(level slog.Leveler) *slog.HandlerOptions {
	return &slog.HandlerOptions{Level: level, ReplaceAttr: replaceAttr}
}

func replaceAttr(_ []string, a slog.Attr) slog.Attr {
	if a.Value.Kind() == slog.KindDuration {
		a.Value = slog.StringValue(precision.Duration(a.Value.Duration()).String())
	}
	return a
}
