package node

import (
	"crypto/rand"
	"crypto/rsa"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"fmt"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"time"
)

// serviceIP is the kubernetes Service's address in the API server's
// service range (envtest's 10.0.0.0/24): the address pods reach it at.
const serviceIP = "10.0.0.1"

// The API server's client certificate and key for the kubelet, in the
// directory writeServingCerts writes.
const (
	kubeletClientCert = "kubelet-client.crt"
	kubeletClientKey  = "kubelet-client.key"
)

// writeServingCerts writes the API server's serving certificate, valid for
// loopback and for the kubernetes Service (so a pod's in-cluster client
// verifies it), and the service-account signing key pair, into dir, where
// the control plane takes them instead of making its own. It returns the
// CA that signed the serving certificate.
func writeServingCerts(dir string) ([]byte, error) {
	if err := os.MkdirAll(dir, 0o700); err != nil {
		return nil, err
	}
	caKey, err := rsa.GenerateKey(rand.Reader, 2048)
	if err != nil {
		return nil, err
	}
	now := time.Now()
	caTmpl := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "plumbline-node-ca"},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(24 * time.Hour), IsCA: true, BasicConstraintsValid: true,
		KeyUsage: x509.KeyUsageCertSign | x509.KeyUsageDigitalSignature}
	caDER, err := x509.CreateCertificate(rand.Reader, caTmpl, caTmpl, &caKey.PublicKey, caKey)
	if err != nil {
		return nil, err
	}
	ca, err := x509.ParseCertificate(caDER)
	if err != nil {
		return nil, err
	}
	key, err := rsa.GenerateKey(rand.Reader, 2048)
	if err != nil {
		return nil, err
	}
	tmpl := &x509.Certificate{SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "kube-apiserver"},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(24 * time.Hour),
		KeyUsage: x509.KeyUsageDigitalSignature | x509.KeyUsageKeyEncipherment, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
		DNSNames:    []string{"localhost", "kubernetes", "kubernetes.default", "kubernetes.default.svc", "kubernetes.default.svc.cluster.local"},
		IPAddresses: []net.IP{net.ParseIP("127.0.0.1"), net.ParseIP(serviceIP), net.ParseIP(BridgeIP)}}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, ca, &key.PublicKey, caKey)
	if err != nil {
		return nil, err
	}
	saKey, err := rsa.GenerateKey(rand.Reader, 2048)
	if err != nil {
		return nil, err
	}
	saTmpl := &x509.Certificate{SerialNumber: big.NewInt(3), Subject: pkix.Name{CommonName: "service-accounts"},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(24 * time.Hour), KeyUsage: x509.KeyUsageDigitalSignature}
	saDER, err := x509.CreateCertificate(rand.Reader, saTmpl, saTmpl, &saKey.PublicKey, saKey)
	if err != nil {
		return nil, err
	}
	// The API server's client certificate for the kubelet (logs, exec,
	// port-forward), signed by the CA the kubelet trusts for clients.
	kcKey, err := rsa.GenerateKey(rand.Reader, 2048)
	if err != nil {
		return nil, err
	}
	kcTmpl := &x509.Certificate{SerialNumber: big.NewInt(4), Subject: pkix.Name{CommonName: "kube-apiserver-kubelet-client", Organization: []string{"system:masters"}},
		NotBefore: now.Add(-time.Hour), NotAfter: now.Add(24 * time.Hour),
		KeyUsage: x509.KeyUsageDigitalSignature | x509.KeyUsageKeyEncipherment, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageClientAuth}}
	kcDER, err := x509.CreateCertificate(rand.Reader, kcTmpl, ca, &kcKey.PublicKey, caKey)
	if err != nil {
		return nil, err
	}
	pemOf := func(typ string, b []byte) []byte { return pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: b}) }
	for name, data := range map[string][]byte{
		kubeletClientCert: pemOf("CERTIFICATE", kcDER),
		kubeletClientKey:  pemOf("RSA PRIVATE KEY", x509.MarshalPKCS1PrivateKey(kcKey)),
		"apiserver.crt":   pemOf("CERTIFICATE", der),
		"apiserver.key":   pemOf("RSA PRIVATE KEY", x509.MarshalPKCS1PrivateKey(key)),
		"sa-signer.crt":   pemOf("CERTIFICATE", saDER),
		"sa-signer.key":   pemOf("RSA PRIVATE KEY", x509.MarshalPKCS1PrivateKey(saKey)),
	} {
		if err := os.WriteFile(filepath.Join(dir, name), data, 0o600); err != nil {
			return nil, fmt.Errorf("write %s: %w", name, err)
		}
	}
	return pemOf("CERTIFICATE", caDER), nil
}
