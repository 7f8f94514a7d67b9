package serve

import (
	"io"
	"net"
	"testing"
)

// listenLoopback listens on a free port of 127.0.0.1: the tests talk to
// loopback addresses only.
func listenLoopback(t testing.TB) (net.Listener, error) {
	t.Helper()
	return net.Listen("tcp", "127.0.0.1:0")
}

func ioPipe() (*io.PipeReader, *io.PipeWriter) { return io.Pipe() }
