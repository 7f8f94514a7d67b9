package memcheck

import (
	"fmt"
	"strconv"
	"strings"
)

// ParseSize reads a size such as "400MB", "4GB", "16KB" or "1000" (bytes),
// in decimal units (1 MB = 10⁶ bytes) as the table uses them.
func ParseSize(s string) (int64, error) {
	t := strings.ToUpper(strings.TrimSpace(s))
	mult := int64(1)
	for _, u := range []struct {
		suffix string
		mult   int64
	}{{"KB", 1e3}, {"MB", 1e6}, {"GB", 1e9}, {"B", 1}} {
		if strings.HasSuffix(t, u.suffix) {
			t, mult = strings.TrimSpace(strings.TrimSuffix(t, u.suffix)), u.mult
			break
		}
	}
	f, err := strconv.ParseFloat(t, 64)
	if err != nil || f < 0 || f*float64(mult) > 1e15 {
		return 0, fmt.Errorf("size %q: want a number of bytes with an optional KB, MB or GB suffix", s)
	}
	return int64(f * float64(mult)), nil
}

// FormatBytes writes n in decimal units with three significant digits:
// "42.1 MB", "1.04 GB".
func FormatBytes(n int64) string {
	f := float64(n)
	for _, u := range []string{"B", "kB", "MB", "GB", "TB"} {
		if f < 999.5 || u == "TB" {
			switch {
			case u == "B":
				return fmt.Sprintf("%d B", n)
			case f < 9.995:
				return fmt.Sprintf("%.2f %s", f, u)
			case f < 99.95:
				return fmt.Sprintf("%.1f %s", f, u)
			default:
				return fmt.Sprintf("%.0f %s", f, u)
			}
		}
		f /= 1000
	}
	return ""
}
