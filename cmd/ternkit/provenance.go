package main

import (
	"fmt"
	"os"
	"strconv"
	"time"
)

// maxEpoch is 9999-12-31T23:59:59Z, the last second a four-digit year holds.
const maxEpoch = 253402300799

// sourceDateEpoch returns the build time SOURCE_DATE_EPOCH sets, or the
// zero time when it is unset or empty (then no creation time is recorded
// and rebuilding gives the same bytes). The value is a count of seconds
// since 1970-01-01T00:00:00Z in decimal digits, as `date +%s` prints it.
func sourceDateEpoch() (time.Time, error) {
	v := os.Getenv("SOURCE_DATE_EPOCH")
	if v == "" {
		return time.Time{}, nil
	}
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil || n < 0 || n > maxEpoch || v[0] == '+' {
		return time.Time{}, fmt.Errorf("SOURCE_DATE_EPOCH %q is not a count of seconds since 1970-01-01 (decimal digits, at most %d)", v, int64(maxEpoch))
	}
	return time.Unix(n, 0).UTC(), nil
}
