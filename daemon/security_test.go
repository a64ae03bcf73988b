package daemon_test

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/status"

	"stillsky/daemon"
	"stillsky/internal/rpc"
	stillskyv1 "stillsky/proto/stillsky/v1"
)

// serverName is the name in the test server certificate; clients connect to
// 127.0.0.1 and check this name.
const serverName = "loop.stillsky.test"

// testCA is a certificate authority made for one test.
type testCA struct {
	cert *x509.Certificate
	key  *ecdsa.PrivateKey
	file string // PEM of the CA certificate
}

var serial int64

func newCA(t *testing.T, dir, name string) *testCA {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	serial++
	tmpl := &x509.Certificate{
		SerialNumber:          big.NewInt(serial),
		Subject:               pkix.Name{CommonName: name},
		NotBefore:             time.Now().Add(-time.Hour),
		NotAfter:              time.Now().Add(time.Hour),
		IsCA:                  true,
		BasicConstraintsValid: true,
		KeyUsage:              x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	cert, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	file := filepath.Join(dir, name+"-ca.pem")
	writePEM(t, file, "CERTIFICATE", der)
	return &testCA{cert: cert, key: key, file: file}
}

// issue signs a leaf certificate and returns the paths of its PEM certificate
// and key. A server certificate names serverName and 127.0.0.1.
func (ca *testCA) issue(t *testing.T, dir, name string, server bool) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	serial++
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(serial),
		Subject:      pkix.Name{CommonName: name},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		KeyUsage:     x509.KeyUsageDigitalSignature,
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth},
	}
	if server {
		tmpl.ExtKeyUsage = []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth}
		tmpl.DNSNames = []string{serverName}
		tmpl.IPAddresses = []net.IP{net.IPv4(127, 0, 0, 1)}
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca.cert, &key.PublicKey, ca.key)
	if err != nil {
		t.Fatal(err)
	}
	kder, err := x509.MarshalECPrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, name+".pem"), filepath.Join(dir, name+"-key.pem")
	writePEM(t, certFile, "CERTIFICATE", der)
	writePEM(t, keyFile, "EC PRIVATE KEY", kder)
	return certFile, keyFile
}

// insistingClient is a TLS client configuration that presents its certificate
// whatever CAs the server asks for.
func insistingClient(t *testing.T, caFile, certFile, keyFile string) *tls.Config {
	t.Helper()
	b, err := os.ReadFile(caFile)
	if err != nil {
		t.Fatal(err)
	}
	pool := x509.NewCertPool()
	pool.AppendCertsFromPEM(b)
	cert, err := tls.LoadX509KeyPair(certFile, keyFile)
	if err != nil {
		t.Fatal(err)
	}
	return &tls.Config{
		RootCAs: pool, ServerName: serverName, MinVersion: tls.VersionTLS13,
		GetClientCertificate: func(*tls.CertificateRequestInfo) (*tls.Certificate, error) { return &cert, nil },
	}
}

func writePEM(t *testing.T, path, kind string, der []byte) {
	t.Helper()
	if err := os.WriteFile(path, pem.EncodeToMemory(&pem.Block{Type: kind, Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
}

func writeFile(t *testing.T, path, content string) string {
	t.Helper()
	if err := os.WriteFile(path, []byte(content), 0o600); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestListenOffLoopbackNeedsTLS checks that the daemon refuses to open its Control
// API anywhere but loopback without TLS and client authentication.
func TestListenOffLoopbackNeedsTLS(t *testing.T) {
	dir := t.TempDir()
	ca := newCA(t, dir, "loop")
	cert, key := ca.issue(t, dir, "server", true)
	shortToken := writeFile(t, filepath.Join(dir, "short"), "abc\n")
	for _, c := range []struct {
		name, listen string
		sec          daemon.Security
		want         string // part of the error
	}{
		{"all interfaces, no TLS", "0.0.0.0:0", daemon.Security{}, "needs TLS"},
		{"empty host, no TLS", ":0", daemon.Security{}, "needs TLS"},
		{"IPv6 wildcard, no TLS", "[::]:0", daemon.Security{}, "needs TLS"},
		{"token without TLS", "127.0.0.1:0", daemon.Security{TokenFile: shortToken}, "need TLS"},
		{"TLS without client authentication", "0.0.0.0:0", daemon.Security{CertFile: cert, KeyFile: key}, "no client authentication"},
		{"token shorter than 16 characters", "0.0.0.0:0", daemon.Security{CertFile: cert, KeyFile: key, TokenFile: shortToken}, "at least 16"},
		{"key missing", "0.0.0.0:0", daemon.Security{CertFile: cert, ClientCAFile: ca.file}, "certificate"},
	} {
		t.Run(c.name, func(t *testing.T) {
			d, err := daemon.New(daemon.Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: c.listen, MetricsAddr: "-", Security: c.sec})
			if err == nil {
				t.Errorf("%s: daemon.New accepted listening on %s (at %s)", c.name, c.listen, d.ControlAddr())
				return
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("%s: error %q does not say %q", c.name, err, c.want)
			}
		})
	}
	// Loopback without TLS is the default and fine.
	if _, err := daemon.New(daemon.Config{CameraAddr: "127.0.0.1:1", MirrorAddr: "127.0.0.1:2", ListenAddr: "127.0.0.1:0", MetricsAddr: "-"}); err != nil {
		t.Errorf("loopback without TLS refused: %v", err)
	}
}

// TestControlAuthentication runs the daemon on all interfaces with TLS, a client
// CA and a bearer token, and calls every state-changing RPC with no, wrong and
// right credentials. No credentials is Unauthenticated and a wrong token
// PermissionDenied (the gRPC status code definitions: UNAUTHENTICATED "does not
// have valid authentication credentials", PERMISSION_DENIED "does not have
// permission"); a certificate from another CA fails the TLS handshake (RFC 8446
// §4.4.2.4: the server aborts on a bad certificate); GetStatus stays open; a
// refused call changes nothing.
func TestControlAuthentication(t *testing.T) {
	dir := t.TempDir()
	ca := newCA(t, dir, "site")
	other := newCA(t, dir, "elsewhere")
	serverCert, serverKey := ca.issue(t, dir, "server", true)
	clientCert, clientKey := ca.issue(t, dir, "operator", false)
	strangerCert, strangerKey := other.issue(t, dir, "stranger", false)
	token := writeFile(t, filepath.Join(dir, "token"), "correct-horse-battery-staple-7411\n")
	wrongToken := writeFile(t, filepath.Join(dir, "wrong"), "correct-horse-battery-staple-7412\n")

	dialOpts := func(c rpc.ClientCredentials) []grpc.DialOption {
		t.Helper()
		c.CAFile, c.ServerName = ca.file, serverName
		opts, err := c.DialOptions()
		if err != nil {
			t.Fatal(err)
		}
		return opts
	}
	r := startHostile(t, daemon.Config{
		ListenAddr: "0.0.0.0:0",
		Security:   daemon.Security{CertFile: serverCert, KeyFile: serverKey, ClientCAFile: ca.file, TokenFile: token},
		Interlocks: daemon.Interlocks{StalePeriods: 1 << 20},
	}, dialOpts(rpc.ClientCredentials{TokenFile: token})...)
	r.sync(t)
	addr := loopbackAddr(t, r.d.ControlAddr())
	client := func(opts ...grpc.DialOption) stillskyv1.ControlServiceClient {
		t.Helper()
		conn, err := rpc.Dial(addr, opts...)
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { conn.Close() })
		return stillskyv1.NewControlServiceClient(conn)
	}
	anonymous := client(dialOpts(rpc.ClientCredentials{})...)
	wrong := client(dialOpts(rpc.ClientCredentials{TokenFile: wrongToken})...)
	// A Go client offers no certificate that does not chain to a CA the server
	// names in its CertificateRequest (RFC 8446 §4.3.2, certificate_authorities),
	// so the stranger arrives anonymous...
	stranger := client(dialOpts(rpc.ClientCredentials{CertFile: strangerCert, KeyFile: strangerKey})...)
	// ...unless it insists on presenting its certificate, which the server must
	// then refuse in the handshake.
	forced := client(grpc.WithTransportCredentials(credentials.NewTLS(insistingClient(t, ca.file, strangerCert, strangerKey))))
	plain := client()
	withCert := client(dialOpts(rpc.ClientCredentials{CertFile: clientCert, KeyFile: clientKey})...)

	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	// Every state-changing RPC of the Control API.
	calls := map[string]func(c stillskyv1.ControlServiceClient) error{
		"CloseLoop": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{})
			return err
		},
		"OpenLoop": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.OpenLoop(ctx, &stillskyv1.OpenLoopRequest{})
			return err
		},
		"HoldLoop": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.HoldLoop(ctx, &stillskyv1.HoldLoopRequest{})
			return err
		},
		"ResumeAutonomous": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.ResumeAutonomous(ctx, &stillskyv1.ResumeAutonomousRequest{})
			return err
		},
		"SetGain": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: 0.1})
			return err
		},
		"SetLeak": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.SetLeak(ctx, &stillskyv1.SetLeakRequest{Leak: 0.5})
			return err
		},
		"SetModalGains": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.SetModalGains(ctx, &stillskyv1.SetModalGainsRequest{Gains: []float64{1}})
			return err
		},
		"OptimiseModalGains": func(c stillskyv1.ControlServiceClient) error {
			_, err := c.OptimiseModalGains(ctx, &stillskyv1.OptimiseModalGainsRequest{})
			return err
		},
		"Calibrate": func(c stillskyv1.ControlServiceClient) error {
			s, err := c.Calibrate(ctx, &stillskyv1.CalibrateRequest{})
			if err != nil {
				return err
			}
			_, err = s.Recv()
			return err
		},
		"LoadReconstructor": func(c stillskyv1.ControlServiceClient) error {
			return uploadReconstructor(c, []byte("SIMPLE  =                    T"))
		},
		"SaveReconstructor": func(c stillskyv1.ControlServiceClient) error {
			s, err := c.SaveReconstructor(ctx, &stillskyv1.SaveReconstructorRequest{})
			if err != nil {
				return err
			}
			_, err = s.Recv()
			return err
		},
	}
	before := r.status(t)
	for name, call := range calls {
		t.Run(name, func(t *testing.T) {
			for _, c := range []struct {
				who    string
				client stillskyv1.ControlServiceClient
				code   codes.Code
			}{
				{"no credentials", anonymous, codes.Unauthenticated},
				{"wrong token", wrong, codes.PermissionDenied},
				{"certificate of another CA, not offered", stranger, codes.Unauthenticated},
				{"certificate of another CA, presented", forced, codes.Unavailable},
				{"no TLS", plain, codes.Unavailable},
			} {
				if err := call(c.client); status.Code(err) != c.code {
					t.Errorf("%s with %s: %v, want %v", name, c.who, err, c.code)
				}
			}
		})
	}
	r.sync(t)
	after := r.status(t)
	if after.GetState() != before.GetState() || after.GetGain() != before.GetGain() || after.GetLeak() != before.GetLeak() ||
		after.GetReconstructor() != nil {
		t.Errorf("refused calls changed the state: %v/%g/%g → %v/%g/%g, reconstructor %v",
			before.GetState(), before.GetGain(), before.GetLeak(), after.GetState(), after.GetGain(), after.GetLeak(), after.GetReconstructor())
	}

	// Read-only calls need no credentials, but TLS still.
	if s, err := anonymous.GetStatus(ctx, &stillskyv1.GetStatusRequest{}); err != nil || s.GetSlopeCount() != uint32(r.h.slopes) {
		t.Errorf("GetStatus without credentials: %v (%d slopes)", err, s.GetSlopeCount())
	}
	if tel, err := anonymous.StreamTelemetry(ctx, &stillskyv1.StreamTelemetryRequest{Decimation: 1}); err != nil {
		t.Errorf("StreamTelemetry without credentials: %v", err)
	} else {
		r.send(t, r.good())
		if _, err := tel.Recv(); err != nil {
			t.Errorf("StreamTelemetry without credentials: %v", err)
		}
	}

	// The right token and a certificate of the site CA each change the loop.
	for _, c := range []struct {
		who    string
		client stillskyv1.ControlServiceClient
		gain   float64
	}{{"token", r.client, 0.25}, {"client certificate", withCert, 0.35}} {
		s, err := c.client.SetGain(ctx, &stillskyv1.SetGainRequest{Gain: c.gain})
		if err != nil || s.GetStatus().GetGain() != c.gain {
			t.Errorf("SetGain %g with the %s: %v", c.gain, c.who, err)
		}
	}
	r.loadMatrix(t)
	stop := r.pump(t)
	_, err := withCert.CloseLoop(ctx, &stillskyv1.CloseLoopRequest{})
	stop()
	if err != nil {
		t.Fatalf("CloseLoop with a client certificate: %v", err)
	}
	r.sync(t)
	if s := r.status(t); s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("state %v after an authenticated close, want closed", s.GetState())
	}
	// Once closed, an anonymous open is still refused and the loop stays closed.
	if err := calls["OpenLoop"](anonymous); status.Code(err) != codes.Unauthenticated {
		t.Errorf("anonymous OpenLoop of a closed loop: %v", err)
	}
	r.sync(t)
	if s := r.status(t); s.GetState() != stillskyv1.LoopState_LOOP_STATE_CLOSED {
		t.Errorf("state %v after a refused open, want closed", s.GetState())
	}
}
