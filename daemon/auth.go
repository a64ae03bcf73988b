package daemon

import (
	"context"
	"crypto/subtle"
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"os"
	"strings"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/peer"
	"google.golang.org/grpc/status"

	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// Security is how the Control API is protected. On loopback it may be empty (the
// default); any other listening address needs TLS, and then state-changing RPCs
// need an authenticated client: a client certificate signed by ClientCA (mutual
// TLS), or the bearer token. GetStatus, StreamTelemetry, the health service and
// reflection stay read-only and open.
type Security struct {
	// CertFile and KeyFile are the server's TLS certificate and key (PEM).
	CertFile, KeyFile string
	// ClientCAFile, if set, verifies client certificates (mutual TLS).
	ClientCAFile string
	// TokenFile, if set, holds the bearer token that state-changing RPCs must
	// present as "authorization: Bearer <token>".
	TokenFile string
}

// readOnly lists the RPCs any client may call.
var readOnly = map[string]bool{
	stillskyv1.ControlService_GetStatus_FullMethodName:       true,
	stillskyv1.ControlService_StreamTelemetry_FullMethodName: true,
}

// serverOptions checks the listening address against the security settings and
// returns the gRPC options that enforce them.
func (s Security) serverOptions(addr string) ([]grpc.ServerOption, error) {
	tlsOn := s.CertFile != "" || s.KeyFile != ""
	if !tlsOn {
		if s.ClientCAFile != "" || s.TokenFile != "" {
			return nil, fmt.Errorf("daemon: client credentials need TLS: set the certificate and key")
		}
		if !rpc.IsLoopback(addr) {
			return nil, fmt.Errorf("daemon: listening on %s (not loopback) needs TLS and client authentication", addr)
		}
		return nil, nil
	}
	if s.ClientCAFile == "" && s.TokenFile == "" {
		return nil, fmt.Errorf("daemon: TLS is on but no client authentication is set: give a client CA or a token file")
	}
	cert, err := tls.LoadX509KeyPair(s.CertFile, s.KeyFile)
	if err != nil {
		return nil, fmt.Errorf("daemon: TLS certificate: %w", err)
	}
	cfg := &tls.Config{Certificates: []tls.Certificate{cert}, MinVersion: tls.VersionTLS13}
	if s.ClientCAFile != "" {
		pem, err := os.ReadFile(s.ClientCAFile)
		if err != nil {
			return nil, fmt.Errorf("daemon: client CA: %w", err)
		}
		pool := x509.NewCertPool()
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("daemon: client CA %s: no PEM certificate found", s.ClientCAFile)
		}
		cfg.ClientCAs = pool
		// Read-only clients may come without a certificate; a presented one must verify.
		cfg.ClientAuth = tls.VerifyClientCertIfGiven
	}
	var token []byte
	if s.TokenFile != "" {
		b, err := os.ReadFile(s.TokenFile)
		if err != nil {
			return nil, fmt.Errorf("daemon: token file: %w", err)
		}
		token = []byte(strings.TrimSpace(string(b)))
		if len(token) < 16 {
			return nil, fmt.Errorf("daemon: token in %s is %d characters: use at least 16", s.TokenFile, len(token))
		}
	}
	a := authorizer{token: token, mtls: s.ClientCAFile != ""}
	return []grpc.ServerOption{
		grpc.Creds(credentials.NewTLS(cfg)),
		grpc.ChainUnaryInterceptor(a.unary),
		grpc.ChainStreamInterceptor(a.stream),
	}, nil
}

// authorizer admits a state-changing call with a verified client certificate or
// the right bearer token: none presented is Unauthenticated, a wrong token
// PermissionDenied.
type authorizer struct {
	token []byte
	mtls  bool
}

func (a authorizer) check(ctx context.Context, method string) error {
	if readOnly[method] || !strings.HasPrefix(method, "/"+stillskyv1.ControlService_ServiceDesc.ServiceName+"/") {
		return nil
	}
	if a.mtls {
		if p, ok := peer.FromContext(ctx); ok {
			if ti, ok := p.AuthInfo.(credentials.TLSInfo); ok && len(ti.State.VerifiedChains) > 0 {
				return nil
			}
		}
	}
	if a.token != nil {
		md, _ := metadata.FromIncomingContext(ctx)
		vals := md.Get("authorization")
		if len(vals) == 0 {
			return status.Error(codes.Unauthenticated, "this call changes the loop: present a client certificate or a bearer token")
		}
		// The scheme name is case-insensitive (RFC 7235, section 2.1).
		scheme, got, ok := strings.Cut(vals[0], " ")
		if !ok || !strings.EqualFold(scheme, "Bearer") || subtle.ConstantTimeCompare([]byte(got), a.token) != 1 {
			return status.Error(codes.PermissionDenied, "bearer token not accepted")
		}
		return nil
	}
	return status.Error(codes.Unauthenticated, "this call changes the loop: present a client certificate signed by the configured CA")
}

func (a authorizer) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if err := a.check(ctx, info.FullMethod); err != nil {
		return nil, err
	}
	return h(ctx, req)
}

func (a authorizer) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, h grpc.StreamHandler) error {
	if err := a.check(ss.Context(), info.FullMethod); err != nil {
		return err
	}
	return h(srv, ss)
}
