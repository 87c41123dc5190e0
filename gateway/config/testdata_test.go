package config

import (
	"errors"
	"flag"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

var update = flag.Bool("update", false, "rewrite testdata/config/invalid-*.txt from the current messages")

const configDir = "../../testdata/config"

// TestInvalidConfigs loads every testdata/config/invalid-*.yaml and compares
// the error with the paired invalid-*.txt, exactly; each file breaks exactly
// one rule.
func TestInvalidConfigs(t *testing.T) { checkInvalidDir(t, configDir) }

// checkInvalidDir loads every invalid-*.yaml in dir, compares its error with
// the paired .txt exactly (rewritten with -update) and checks that each
// file breaks one rule.
func checkInvalidDir(t *testing.T, dir string) {
	checkGolden(t, dir, "invalid-*.yaml", func(t *testing.T, f string) string {
		_, err := Load(f)
		require.Error(t, err, "%s must not load", f)
		var ve *ValidationError
		if errors.As(err, &ve) {
			assert.Len(t, ve.Problems, 1, "one broken rule per file: %v", ve.Problems)
		}
		return err.Error()
	})
}

// checkGolden runs one subtest per file of dir matching pattern: got
// returns the file's text (an error, warnings), compared exactly with the
// paired .txt (rewritten with -update).
func checkGolden(t *testing.T, dir, pattern string, got func(t *testing.T, f string) string) {
	files, err := filepath.Glob(filepath.Join(dir, pattern))
	require.NoError(t, err)
	require.NotEmpty(t, files)
	for _, f := range files {
		t.Run(strings.TrimSuffix(filepath.Base(f), ".yaml"), func(t *testing.T) {
			text := got(t, f)
			want := strings.TrimSuffix(f, ".yaml") + ".txt"
			if *update {
				require.NoError(t, os.WriteFile(want, []byte(text+"\n"), 0o644))
			}
			b, err := os.ReadFile(want)
			require.NoError(t, err, "every %s needs its expected text in a .txt", pattern)
			assert.Equal(t, strings.TrimRight(string(b), "\n"), text)
		})
	}
}

// TestValidConfigs loads the valid examples.
func TestValidConfigs(t *testing.T) {
	for _, f := range []string{"farm.yaml", "minimal.yaml", "broker-tls.yaml"} {
		t.Run(f, func(t *testing.T) {
			c, err := Load(filepath.Join(configDir, f))
			require.NoError(t, err)
			require.NotEmpty(t, c.Sites)
		})
	}
}
