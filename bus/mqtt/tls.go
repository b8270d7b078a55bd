package mqtt

import (
	"crypto/tls"
	"crypto/x509"
	"encoding/pem"
	"errors"
	"fmt"
	"os"
)

// TLSConfig builds the TLS configuration of broker connections from PEM
// files. caFile holds the certificates of the authorities trusted to sign
// the broker's certificate; empty means the system roots. certFile and
// keyFile hold the client certificate (with its chain) and its private
// key, both or neither. serverName, when set, is the name the broker's
// certificate must carry, instead of the host of the broker URL. TLS 1.2
// is the least version accepted.
//
// Errors name the file at fault.
func TLSConfig(caFile, certFile, keyFile, serverName string) (*tls.Config, error) {
	c := &tls.Config{MinVersion: tls.VersionTLS12, ServerName: serverName}
	if caFile != "" {
		pool, err := loadCAs(caFile)
		if err != nil {
			return nil, err
		}
		c.RootCAs = pool
	}
	switch {
	case certFile == "" && keyFile == "":
	case certFile == "":
		return nil, fmt.Errorf("tls: key file %s given without a certificate file", keyFile)
	case keyFile == "":
		return nil, fmt.Errorf("tls: certificate file %s given without a key file", certFile)
	default:
		certPEM, err := os.ReadFile(certFile)
		if err != nil {
			return nil, fmt.Errorf("tls: client certificate: %w", err)
		}
		keyPEM, err := os.ReadFile(keyFile)
		if err != nil {
			return nil, fmt.Errorf("tls: client key: %w", err)
		}
		if !hasPEM(certPEM, "CERTIFICATE") {
			return nil, fmt.Errorf("tls: client certificate file %s: no PEM CERTIFICATE block", certFile)
		}
		if !hasPEM(keyPEM, "PRIVATE KEY") {
			return nil, fmt.Errorf("tls: client key file %s: no PEM private key block", keyFile)
		}
		pair, err := tls.X509KeyPair(certPEM, keyPEM)
		if err != nil {
			return nil, fmt.Errorf("tls: client certificate %s with key %s: %w", certFile, keyFile, err)
		}
		c.Certificates = []tls.Certificate{pair}
	}
	return c, nil
}

// loadCAs parses every CERTIFICATE block of file.
func loadCAs(file string) (*x509.CertPool, error) {
	data, err := os.ReadFile(file)
	if err != nil {
		return nil, fmt.Errorf("tls: CA file: %w", err)
	}
	pool := x509.NewCertPool()
	n := 0
	for rest, i := data, 1; ; i++ {
		var block *pem.Block
		block, rest = pem.Decode(rest)
		if block == nil {
			break
		}
		if block.Type != "CERTIFICATE" {
			continue
		}
		cert, err := x509.ParseCertificate(block.Bytes)
		if err != nil {
			return nil, fmt.Errorf("tls: CA file %s: PEM block %d: %w", file, i, err)
		}
		pool.AddCert(cert)
		n++
	}
	if n == 0 {
		return nil, fmt.Errorf("tls: CA file %s: %w", file, errNoCertificate)
	}
	return pool, nil
}

var errNoCertificate = errors.New("no PEM CERTIFICATE block")

// hasPEM reports whether data holds a PEM block whose type ends with
// suffix ("PRIVATE KEY" matches PKCS #8, EC and RSA keys).
func hasPEM(data []byte, suffix string) bool {
	for {
		var block *pem.Block
		block, data = pem.Decode(data)
		if block == nil {
			return false
		}
		if len(block.Type) >= len(suffix) && block.Type[len(block.Type)-len(suffix):] == suffix {
			return true
		}
	}
}
