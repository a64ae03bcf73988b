package bench_test

import (
	"context"
	"path/filepath"
	"testing"

	"google.golang.org/grpc"

	"stillsky/internal/rpc"
	"stillsky/sim/bench"
)

// serve runs b's camera and mirror on one unix socket until the test ends and
// returns a context that ends with it and a device connection to the socket.
func serve(t *testing.T, b *bench.Server) (context.Context, *grpc.ClientConn) {
	t.Helper()
	addr := "unix:" + filepath.Join(t.TempDir(), "dev.sock")
	l, err := bench.Listen(bench.Addrs{Camera: addr})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- b.Serve(ctx, l) }()
	t.Cleanup(func() { cancel(); <-done })
	conn, err := rpc.Dial(addr, rpc.DeviceDialOptions()...)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return ctx, conn
}
