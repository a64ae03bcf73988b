// Package rpc holds the gRPC plumbing shared by the bench and the loop daemon:
// addresses that may be TCP or unix sockets, and servers that always offer the
// standard health service and server reflection.
package rpc

import (
	"errors"
	"fmt"
	"net"
	"os"
	"strings"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/reflection"
)

// Unix-socket addresses are written "unix:/path/to/socket"; anything else is a TCP
// host:port.
const unixPrefix = "unix:"

// Listen opens addr. A stale unix socket file left by a killed process is removed.
func Listen(addr string) (net.Listener, error) {
	if path, ok := strings.CutPrefix(addr, unixPrefix); ok {
		if path == "" {
			return nil, fmt.Errorf("address %q: empty unix socket path", addr)
		}
		if err := os.Remove(path); err != nil && !errors.Is(err, os.ErrNotExist) {
			return nil, fmt.Errorf("address %q: removing stale socket: %w", addr, err)
		}
		return net.Listen("unix", path)
	}
	if _, _, err := net.SplitHostPort(addr); err != nil {
		return nil, fmt.Errorf("address %q: want host:port or unix:/path: %w", addr, err)
	}
	return net.Listen("tcp", addr)
}

// IsLoopback reports whether addr is a unix socket or a TCP address on a loopback
// interface.
func IsLoopback(addr string) bool {
	if strings.HasPrefix(addr, unixPrefix) {
		return true
	}
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}

// Dial returns a client connection to a device on addr. Device links are local
// (loopback or unix socket), so they carry no transport security.
func Dial(addr string, opts ...grpc.DialOption) (*grpc.ClientConn, error) {
	target := addr
	if !strings.HasPrefix(addr, unixPrefix) {
		target = "passthrough:///" + addr
	}
	opts = append([]grpc.DialOption{grpc.WithTransportCredentials(insecure.NewCredentials())}, opts...)
	conn, err := grpc.NewClient(target, opts...)
	if err != nil {
		return nil, fmt.Errorf("dial %s: %w", addr, err)
	}
	return conn, nil
}

// NewServer returns a gRPC server with the health service (reporting SERVING for
// "" and for each of services) and server reflection registered. Register the
// application services on it before serving.
func NewServer(services []string, opts ...grpc.ServerOption) (*grpc.Server, *health.Server) {
	s := grpc.NewServer(opts...)
	h := health.NewServer()
	h.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	for _, name := range services {
		h.SetServingStatus(name, healthpb.HealthCheckResponse_SERVING)
	}
	healthpb.RegisterHealthServer(s, h)
	reflection.Register(s)
	return s, h
}
