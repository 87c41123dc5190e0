package mqtt

import (
	"context"
	"fmt"
	"log/slog"
	"strings"
	"sync"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// RouteLibraryLogs sends the paho library's own error, critical and
// warning loggers (process-wide variables; silent by default) through log,
// so a JSON log stays JSON. The returned function restores the previous
// loggers.
func RouteLibraryLogs(log *slog.Logger) (restore func()) {
	libLogMu.Lock()
	defer libLogMu.Unlock()
	prevErr, prevCrit, prevWarn := paho.ERROR, paho.CRITICAL, paho.WARN
	paho.ERROR = pahoLogger{log, slog.LevelError}
	paho.CRITICAL = pahoLogger{log, slog.LevelError}
	paho.WARN = pahoLogger{log, slog.LevelWarn}
	return func() {
		libLogMu.Lock()
		defer libLogMu.Unlock()
		paho.ERROR, paho.CRITICAL, paho.WARN = prevErr, prevCrit, prevWarn
	}
}

var libLogMu sync.Mutex

// pahoLogger is paho.Logger over slog.
type pahoLogger struct {
	log   *slog.Logger
	level slog.Level
}

var _ paho.Logger = pahoLogger{}

func (l pahoLogger) Println(v ...any) {
	l.log.Log(context.Background(), l.level, strings.TrimSpace(fmt.Sprintln(v...)), "source", "paho")
}

func (l pahoLogger) Printf(format string, v ...any) {
	l.log.Log(context.Background(), l.level, strings.TrimSpace(fmt.Sprintf(format, v...)), "source", "paho")
}
