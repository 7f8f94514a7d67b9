//go:build !unix

package memcheck

import "errors"

func readMapped(string) error { return errors.New("no memory maps on this system") }
