package cli

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/bunchsieve/bunchsieve/internal/syncbuf"
)

// writeCertificates writes a CA certificate and a server certificate for
// 127.0.0.1 signed by it (ECDSA P-256, crypto/x509) into dir, and returns
// the CA's PEM file and the server's certificate and key files.
func writeCertificates(t *testing.T, dir, name string) (ca, cert, key string) {
	t.Helper()
	caKey, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	now := time.Now()
	caTmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: name + " test CA"},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour),
		IsCA: true, BasicConstraintsValid: true, KeyUsage: x509.KeyUsageCertSign,
	}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	caCert, err := x509.ParseCertificate(caDER)
	if err != nil {
		t.Fatal(err)
	}
	srvKey, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	srvTmpl := &x509.Certificate{
		SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "127.0.0.1"},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(time.Hour),
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1")},
		KeyUsage:    x509.KeyUsageDigitalSignature, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	srvDER, err := x509.CreateCertificate(rand.Reader, srvTmpl, caCert, &srvKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	keyDER, err := x509.MarshalECPrivateKey(srvKey)
	if err != nil {
		t.Fatal(err)
	}
	write := func(file, kind string, der []byte) string {
		p := filepath.Join(dir, file)
		if err := os.WriteFile(p, pem.EncodeToMemory(&pem.Block{Type: kind, Bytes: der}), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	return write(name+"-ca.pem", "CERTIFICATE", caDER), write(name+"-cert.pem", "CERTIFICATE", srvDER), write(name+"-key.pem", "EC PRIVATE KEY", keyDER)
}

// Run control over TLS: serve with --tls-cert/--tls-key, steer it with
// ctl --tls-ca; a client that does not trust the server's CA, or that
// speaks plaintext, gets nothing done.
func TestServeAndCtlOverTLS(t *testing.T) {
	dir := t.TempDir()
	ca, cert, key := writeCertificates(t, dir, "good")
	otherCA, _, _ := writeCertificates(t, dir, "other")
	tokenFile := filepath.Join(dir, "token")

	addr, _ := startServe(t, "--control", "127.0.0.1:0", "--metrics-addr", "", "--token-file", tokenFile,
		"--tls-cert", cert, "--tls-key", key, "--crossings", "2000", "--rate", "0")

	ctl := func(args ...string) (int, string, string) {
		return runCLI(t, 15*time.Second, append([]string{"ctl", "--addr", addr, "--token-file", tokenFile, "--timeout", "5s"}, args...)...)
	}
	if code, stdout, stderr := ctl("--tls-ca", ca, "status"); code != 0 || !strings.Contains(stdout, "ready") {
		t.Fatalf("status over TLS: exit %d, %q %q", code, stdout, stderr)
	}
	if code, stdout, stderr := ctl("--tls-ca", ca, "start"); code != 0 {
		t.Fatalf("start over TLS: exit %d, %q %q", code, stdout, stderr)
	}
	if code, stdout, stderr := ctl("--tls-ca", ca, "stop"); code != 0 {
		t.Fatalf("stop over TLS: exit %d, %q %q", code, stdout, stderr)
	}
	if code, stdout, _ := ctl("--tls-ca", otherCA, "status"); code == 0 {
		t.Fatalf("a client trusting another CA was answered: %q", stdout)
	}
	if code, stdout, _ := ctl("status"); code == 0 {
		t.Fatalf("a plaintext client was answered by the TLS server: %q", stdout)
	}
}

// startServe runs `bunchsieve serve args...` until the test ends and
// returns its run-control address and its standard output so far.
func startServe(t *testing.T, args ...string) (addr string, out *syncbuf.Buffer) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	out = &syncbuf.Buffer{}
	var errb syncbuf.Buffer
	done := make(chan int, 1)
	go func() { done <- run(ctx, append([]string{"serve"}, args...), out, &errb) }()
	t.Cleanup(func() {
		cancel()
		select {
		case <-done:
		case <-time.After(40 * time.Second):
			t.Error("serve did not stop")
		}
	})
	addrRE := regexp.MustCompile(`run control on (127\.0\.0\.1:\d+)`)
	for deadline := time.Now().Add(20 * time.Second); ; {
		if m := addrRE.FindStringSubmatch(out.String()); m != nil {
			return m[1], out
		}
		select {
		case code := <-done:
			t.Fatalf("serve exited %d: %s", code, errb.String())
		default:
		}
		if time.Now().After(deadline) {
			t.Fatalf("serve did not report its address: %q %q", out.String(), errb.String())
		}
		time.Sleep(10 * time.Millisecond)
	}
}
