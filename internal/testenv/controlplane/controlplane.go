// Package controlplane starts a real Kubernetes control plane on loopback
// (etcd and kube-apiserver, built from source by hack/build-controlplane.sh)
// with plumbline's CRDs installed, for the API-server tests and the demo.
package controlplane

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"time"

	"k8s.io/client-go/rest"
	"sigs.k8s.io/controller-runtime/pkg/envtest"
)

// Options say where the binaries and CRDs are.
type Options struct {
	// AssetsDir holds the kube-apiserver and etcd binaries.
	AssetsDir string
	// CRDDir holds the CRD manifests to install.
	CRDDir string
	// KubeconfigPath, when set, receives an admin kubeconfig for kubectl.
	KubeconfigPath string
	// APIServerArgs replace or add kube-apiserver flags (without "--"),
	// for example authorization-mode for a cluster with a real node.
	APIServerArgs map[string]string
	// Dir, when set, holds the API server's certificates and etcd's data
	// (dir/apiserver, dir/etcd) instead of new temporary directories, so
	// their command lines name it.
	Dir string
	// ServingCA, with Dir, says that dir/apiserver already holds the
	// serving certificate and the service-account key pair (apiserver.crt
	// and .key, sa-signer.crt and .key), signed by this CA, to use instead
	// of the ones the control plane would make.
	ServingCA []byte
}

// Env is a running control plane.
type Env struct {
	// Config talks to the API server as an administrator.
	Config *rest.Config
	// KubeconfigPath is where the admin kubeconfig was written, if asked.
	KubeconfigPath string
	env            *envtest.Environment
}

// ErrNoBinaries means the control-plane binaries are not built.
var ErrNoBinaries = errors.New("kube-apiserver and etcd are not built")

// Start starts etcd and kube-apiserver and installs the CRDs. It takes about
// five seconds.
func Start(o Options) (*Env, error) {
	for _, b := range []string{"kube-apiserver", "etcd"} {
		if _, err := os.Stat(filepath.Join(o.AssetsDir, b)); err != nil {
			return nil, fmt.Errorf("%w: %s not found in %q (run 'make controlplane', or set KUBEBUILDER_ASSETS to the directory that holds them)", ErrNoBinaries, b, o.AssetsDir)
		}
	}
	env := &envtest.Environment{
		BinaryAssetsDirectory:    o.AssetsDir,
		CRDDirectoryPaths:        []string{o.CRDDir},
		ErrorIfCRDPathMissing:    true,
		ControlPlaneStartTimeout: 2 * time.Minute,
		ControlPlaneStopTimeout:  time.Minute,
	}
	if o.Dir != "" {
		api, etcd := filepath.Join(o.Dir, "apiserver"), filepath.Join(o.Dir, "etcd")
		for _, d := range []string{api, etcd} {
			if err := os.MkdirAll(d, 0o700); err != nil {
				return nil, err
			}
		}
		env.ControlPlane.GetAPIServer().CertDir = api
		env.ControlPlane.Etcd = &envtest.Etcd{DataDir: etcd}
		if o.ServingCA != nil {
			env.ControlPlane.GetAPIServer().SecureServing.CA = o.ServingCA
		}
	}
	if len(o.APIServerArgs) > 0 {
		args := env.ControlPlane.GetAPIServer().Configure()
		for k, v := range o.APIServerArgs {
			args.Set(k, v)
		}
	}
	cfg, err := env.Start()
	if err != nil {
		return nil, fmt.Errorf("start control plane from %s with CRDs from %s: %w", o.AssetsDir, o.CRDDir, err)
	}
	e := &Env{Config: cfg, env: env}
	if o.KubeconfigPath != "" {
		if err := e.writeKubeconfig(o.KubeconfigPath); err != nil {
			_ = e.Stop()
			return nil, err
		}
	}
	return e, nil
}

func (e *Env) writeKubeconfig(path string) error {
	user, err := e.env.AddUser(envtest.User{Name: "plumbline-admin", Groups: []string{"system:masters"}}, nil)
	if err != nil {
		return fmt.Errorf("add admin user: %w", err)
	}
	kc, err := user.KubeConfig()
	if err != nil {
		return fmt.Errorf("render admin kubeconfig: %w", err)
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return fmt.Errorf("create directory for kubeconfig: %w", err)
	}
	if err := os.WriteFile(path, kc, 0o600); err != nil {
		return fmt.Errorf("write kubeconfig: %w", err)
	}
	e.KubeconfigPath = path
	return nil
}

// KubeconfigFor writes a kubeconfig for a user the API server
// authenticates by a client certificate with name as its CN and groups as
// its O: a node's kubelet is system:node:NAME in system:nodes.
func (e *Env) KubeconfigFor(path, name string, groups ...string) error {
	user, err := e.env.AddUser(envtest.User{Name: name, Groups: groups}, nil)
	if err != nil {
		return fmt.Errorf("add user %s: %w", name, err)
	}
	kc, err := user.KubeConfig()
	if err != nil {
		return fmt.Errorf("render the kubeconfig of %s: %w", name, err)
	}
	return os.WriteFile(path, kc, 0o600)
}

// CertDir holds the API server's certificates and its service-account
// signing key (sa-signer.key), which a controller manager needs to issue
// tokens.
func (e *Env) CertDir() string { return e.env.ControlPlane.APIServer.CertDir }

// CA is the certificate that signed the API server's serving certificate.
func (e *Env) CA() []byte { return e.env.ControlPlane.APIServer.SecureServing.CA }

// Stop stops the API server and etcd and removes their data.
func (e *Env) Stop() error {
	if err := e.env.Stop(); err != nil {
		return fmt.Errorf("stop control plane: %w", err)
	}
	return nil
}
