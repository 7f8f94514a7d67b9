//go:build !openblas

package linalg

func kernelName() string { return kernel32().name }
