// Package rpc holds the gRPC plumbing shared by the bench and the loop daemon:
// addresses that may be TCP or unix sockets, and servers that always offer the
// standard health service and server reflection.
package rpc

import (
	"context"
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"net"
	"os"
	"strings"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials"
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

// IsUnix reports whether addr names a unix socket ("unix:/path").
func IsUnix(addr string) bool { return strings.HasPrefix(addr, unixPrefix) }

// IsLoopback reports whether addr is a unix socket or a TCP address on a loopback
// interface.
func IsLoopback(addr string) bool {
	if IsUnix(addr) {
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

// Dial returns a client connection to addr. Without options it carries no
// transport security, as fits device links on loopback or a unix socket; pass
// ClientCredentials.DialOptions for TLS.
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
	h := registerHealth(s, services)
	reflection.Register(s)
	return s, h
}

func registerHealth(s *grpc.Server, services []string) *health.Server {
	h := health.NewServer()
	h.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	for _, name := range services {
		h.SetServingStatus(name, healthpb.HealthCheckResponse_SERVING)
	}
	healthpb.RegisterHealthServer(s, h)
	return h
}

// NewHealthOnlyServer returns a plain gRPC server with nothing but the health
// service, reporting SERVING for "" and each of services.
func NewHealthOnlyServer(services []string) *grpc.Server {
	s := grpc.NewServer()
	registerHealth(s, services)
	return s
}

// realTimeWindow is the fixed HTTP/2 flow-control window of each real-time
// stream. A fixed window turns off gRPC's bandwidth-delay probing, whose ping
// frames cost allocations and wake-ups every few messages. It is small enough
// that a camera link holds tens of frames, not thousands, so that a loop that
// falls behind meets back-pressure (the camera drops frames) instead of
// working through a long backlog of stale ones: 256 KiB is about 80
// default-scenario frames (80 ms at 1 kHz; a loop that skips every other late
// frame works through them at its compute time, a few milliseconds by
// estimate), 25 of the 40×40 scenario.
// The price is a WINDOW_UPDATE frame per quarter window read (gRPC's
// threshold), a heap object each: about one every 20 default-scenario frames,
// where the 64 KiB window before sent one every 5 (0.14–0.19 objects per frame,
// TestHotPathAllocations). It is the window of what the loop receives: frames,
// and the mirror's acknowledgements.
const realTimeWindow = 256 << 10

// commandWindow is the window of what the devices receive: the loop's
// commands (and the transport probe's pings). A mirror applies a command as it
// arrives, so the loop meets no useful back-pressure here, only a blocked send
// when the window runs out; a wide window keeps that away and makes its
// WINDOW_UPDATE frames rare (one per 128 default-scenario commands, where a
// 64 KiB window sent one every 8, two heap objects each in the loop's process).
// Commands in flight stay bounded: 1 MiB is 512 default-scenario commands, and
// the mirror's acknowledgements report when each arrived.
const commandWindow = 1 << 20

// realTimeConnWindow is the connection's window. Each device connection carries
// one real-time stream, whose own window already bounds what is in flight, so
// the connection's may be large: its WINDOW_UPDATE frames, sent per quarter
// window, then come every few thousand frames instead of as often as the
// stream's.
const realTimeConnWindow = 16 << 20

// DeviceDialOptions are the client options of the camera and mirror links.
func DeviceDialOptions() []grpc.DialOption {
	return []grpc.DialOption{
		grpc.WithStaticStreamWindowSize(realTimeWindow),
		grpc.WithStaticConnWindowSize(realTimeConnWindow),
	}
}

// DeviceServerOptions are the matching server options of the devices.
func DeviceServerOptions() []grpc.ServerOption {
	return []grpc.ServerOption{
		grpc.StaticStreamWindowSize(commandWindow),
		grpc.StaticConnWindowSize(realTimeConnWindow),
	}
}

// ClientCredentials are a client's TLS and authentication settings. All empty
// means a plain connection.
type ClientCredentials struct {
	// CAFile verifies the server's certificate and turns TLS on.
	CAFile string
	// CertFile and KeyFile are the client's certificate for mutual TLS.
	CertFile, KeyFile string
	// TokenFile holds a bearer token sent with every call (TLS only).
	TokenFile string
	// ServerName overrides the name checked in the server's certificate.
	ServerName string
}

// DialOptions returns the options that apply c.
func (c ClientCredentials) DialOptions() ([]grpc.DialOption, error) {
	if c.CAFile == "" {
		if c.CertFile != "" || c.KeyFile != "" || c.TokenFile != "" {
			return nil, errors.New("client certificate or token needs TLS: give the server's CA with --tls-ca")
		}
		return nil, nil
	}
	pem, err := os.ReadFile(c.CAFile)
	if err != nil {
		return nil, fmt.Errorf("server CA: %w", err)
	}
	pool := x509.NewCertPool()
	if !pool.AppendCertsFromPEM(pem) {
		return nil, fmt.Errorf("server CA %s: no PEM certificate found", c.CAFile)
	}
	cfg := &tls.Config{RootCAs: pool, ServerName: c.ServerName, MinVersion: tls.VersionTLS13}
	if c.CertFile != "" || c.KeyFile != "" {
		cert, err := tls.LoadX509KeyPair(c.CertFile, c.KeyFile)
		if err != nil {
			return nil, fmt.Errorf("client certificate: %w", err)
		}
		cfg.Certificates = []tls.Certificate{cert}
	}
	opts := []grpc.DialOption{grpc.WithTransportCredentials(credentials.NewTLS(cfg))}
	if c.TokenFile != "" {
		b, err := os.ReadFile(c.TokenFile)
		if err != nil {
			return nil, fmt.Errorf("token file: %w", err)
		}
		opts = append(opts, grpc.WithPerRPCCredentials(bearer(strings.TrimSpace(string(b)))))
	}
	return opts, nil
}

// bearer sends "authorization: Bearer <token>" with every call, over TLS only.
type bearer string

func (b bearer) GetRequestMetadata(context.Context, ...string) (map[string]string, error) {
	return map[string]string{"authorization": "Bearer " + string(b)}, nil
}

func (bearer) RequireTransportSecurity() bool { return true }
