package main

import (
	"fmt"
	"strconv"
	"strings"
)

// byteUnits are the suffixes parseByteSize takes: decimal (kB, MB, GB)
// and binary (KiB, MiB, GiB) multiples.
var byteUnits = []struct {
	suffix string
	scale  int64
}{
	{"KiB", 1 << 10}, {"MiB", 1 << 20}, {"GiB", 1 << 30},
	{"kB", 1e3}, {"KB", 1e3}, {"MB", 1e6}, {"GB", 1e9}, {"B", 1},
}

// parseByteSize reads a size such as 4096, 500MB or 2GiB; "" is 0.
func parseByteSize(s string) (int64, error) {
	if s == "" {
		return 0, nil
	}
	num, scale := s, int64(1)
	for _, u := range byteUnits {
		if strings.HasSuffix(s, u.suffix) {
			num, scale = strings.TrimSpace(strings.TrimSuffix(s, u.suffix)), u.scale
			break
		}
	}
	n, err := strconv.ParseInt(num, 10, 64)
	if err != nil || n <= 0 || n > (1<<62)/scale {
		return 0, fmt.Errorf("size %q: want a positive whole number of bytes, optionally with kB, MB, GB, KiB, MiB or GiB", s)
	}
	return n * scale, nil
}
