// Package cblas calls OpenBLAS's cblas_sgemm and cblas_dgemm through cgo.
// It is compiled only with the openblas build tag (without it the package is
// empty), and only package linalg imports it: cgo and Go assembly cannot
// share one package.
package cblas
