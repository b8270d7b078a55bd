package mqtttest

import (
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
	"sync/atomic"
	"testing"
	"time"
)

// CA is a certificate authority made for one test: an ECDSA P-256 key
// and a self-signed certificate valid for a day, written as PEM to
// CertFile.
type CA struct {
	Cert     *x509.Certificate
	CertFile string

	key *ecdsa.PrivateKey
	dir string
}

var serial atomic.Int64

// NewCA makes a certificate authority named name and writes its
// certificate to a file in a temporary directory of t.
func NewCA(t testing.TB, name string) *CA {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatalf("CA key: %v", err)
	}
	now := time.Now()
	tmpl := &x509.Certificate{
		SerialNumber:          big.NewInt(serial.Add(1)),
		Subject:               pkix.Name{CommonName: name},
		NotBefore:             now.Add(-time.Hour),
		NotAfter:              now.Add(24 * time.Hour),
		IsCA:                  true,
		BasicConstraintsValid: true,
		KeyUsage:              x509.KeyUsageCertSign | x509.KeyUsageCRLSign | x509.KeyUsageDigitalSignature,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatalf("CA certificate: %v", err)
	}
	cert, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatalf("CA certificate: %v", err)
	}
	ca := &CA{Cert: cert, key: key, dir: t.TempDir()}
	ca.CertFile = writePEM(t, filepath.Join(ca.dir, "ca.pem"), "CERTIFICATE", der)
	return ca
}

// Issue makes a certificate for name signed by ca, valid for server and
// client authentication and for hosts (IP addresses or DNS names), and
// writes it and its key (PKCS #8) to PEM files, whose paths it returns.
func (ca *CA) Issue(t testing.TB, name string, hosts ...string) (certFile, keyFile string) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatalf("key for %s: %v", name, err)
	}
	now := time.Now()
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(serial.Add(1)),
		Subject:      pkix.Name{CommonName: name},
		NotBefore:    now.Add(-time.Hour),
		NotAfter:     now.Add(24 * time.Hour),
		KeyUsage:     x509.KeyUsageDigitalSignature,
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth, x509.ExtKeyUsageClientAuth},
	}
	for _, h := range hosts {
		if ip := net.ParseIP(h); ip != nil {
			tmpl.IPAddresses = append(tmpl.IPAddresses, ip)
		} else {
			tmpl.DNSNames = append(tmpl.DNSNames, h)
		}
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca.Cert, &key.PublicKey, ca.key)
	if err != nil {
		t.Fatalf("certificate for %s: %v", name, err)
	}
	pkcs8, err := x509.MarshalPKCS8PrivateKey(key)
	if err != nil {
		t.Fatalf("key for %s: %v", name, err)
	}
	certFile = writePEM(t, filepath.Join(ca.dir, name+".pem"), "CERTIFICATE", der)
	keyFile = writePEM(t, filepath.Join(ca.dir, name+"-key.pem"), "PRIVATE KEY", pkcs8)
	return certFile, keyFile
}

func writePEM(t testing.TB, path, typ string, der []byte) string {
	t.Helper()
	if err := os.WriteFile(path, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: der}), 0o600); err != nil {
		t.Fatalf("write %s: %v", path, err)
	}
	return path
}
