//go:build !amd64

package tritmat

func dot(a, b []int8) int32 { return DotPortable(a, b) }
