package report

import (
	"fmt"
	"strconv"
	"strings"
)

// FormatBytes writes a byte count with binary units: "512 B", "1.5 KiB",
// "8.0 MiB".
func FormatBytes(n int64) string {
	const unit = 1024
	if n < unit {
		return fmt.Sprintf("%d B", n)
	}
	div, exp := int64(unit), 0
	for m := n / unit; m >= unit; m /= unit {
		div *= unit
		exp++
	}
	return fmt.Sprintf("%.1f %ciB", float64(n)/float64(div), "KMGTPE"[exp])
}

// FormatSizeChange writes how much smaller the artifact is than its source
// given ratio = source / artifact: "3.06x smaller", or "1.20x larger".
func FormatSizeChange(ratio float64) string {
	switch {
	case ratio >= 1:
		return fmt.Sprintf("%.2fx smaller", ratio)
	case ratio > 0:
		return fmt.Sprintf("%.2fx larger", 1/ratio)
	}
	return "no size to compare"
}

// FormatShape writes a shape as "[2048x256]"; a scalar is "[]".
func FormatShape(shape []int64) string {
	parts := make([]string, len(shape))
	for i, d := range shape {
		parts[i] = strconv.FormatInt(d, 10)
	}
	return "[" + strings.Join(parts, "x") + "]"
}

// FormatCount writes an integer in groups of three: "3,162,112".
func FormatCount(n int64) string {
	s := strconv.FormatInt(n, 10)
	neg := strings.HasPrefix(s, "-")
	s = strings.TrimPrefix(s, "-")
	var b strings.Builder
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	if neg {
		return "-" + b.String()
	}
	return b.String()
}
