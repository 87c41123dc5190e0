package main

import "fmt"

// count formats n with its noun in the singular or the plural: count(1,
// "gap", "gaps") is "1 gap", count(0, "gap", "gaps") "0 gaps".
func count(n int, one, many string) string {
	if n == 1 {
		return fmt.Sprintf("%d %s", n, one)
	}
	return fmt.Sprintf("%d %s", n, many)
}
