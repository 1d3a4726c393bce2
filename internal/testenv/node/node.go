// Package node starts a real single-node Kubernetes cluster on this
// machine: the control plane of internal/testenv/controlplane with the Node
// and RBAC authorizers, the real kube-controller-manager and kube-scheduler,
// and a real kubelet on a private containerd (Debian's, with runc and the
// CNI bridge plugin), whose pods sit on a bridge the node creates. Images
// come from archives imported into containerd (no registry); the sandbox
// image is a tiny pause program built here.
//
// Everything it creates on the host (the bridge, the kubelet's fixed
// paths, mounts under its directory) is recorded in its directory and
// removed at Stop, and by the next Start after a crash. All traffic stays
// on loopback and on the bridge. It needs root; Available says why a
// machine cannot run it.
package node

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"time"

	corev1 "k8s.io/api/core/v1"
	metav1 "k8s.io/apimachinery/pkg/apis/meta/v1"
	"k8s.io/apimachinery/pkg/util/wait"
	"k8s.io/client-go/kubernetes"
	"k8s.io/client-go/rest"

	"plumbline.dev/plumbline/internal/image"
	"plumbline.dev/plumbline/internal/testenv/containerd"
	"plumbline.dev/plumbline/internal/testenv/controlplane"
	"plumbline.dev/plumbline/internal/testenv/proc"
)

// The node's fixed names and addresses.
const (
	// Name is the node's name; it resolves to 127.0.0.1, so the API
	// server reaches the kubelet on loopback.
	Name = "localhost"
	// Bridge is the bridge the pods sit on; its address is the node's IP.
	Bridge   = "plumbline0"
	BridgeIP = "10.88.0.1"
	podCIDR  = "10.88.0.0/16"
	// serviceCIDR is the API server's service range (envtest's).
	serviceCIDR = "10.0.0.0/24"
	// PauseImage is the sandbox image, built and imported by Start.
	PauseImage = "plumbline.local/pause:1"
	cniBinDir  = "/usr/lib/cni"
)

// kubeletHostPaths are the host paths the kubelet writes whatever its root
// directory; the ones a start creates are removed at stop.
var kubeletHostPaths = []string{"/var/lib/kubelet", "/var/log/containers", "/var/log/pods", "/usr/libexec/kubernetes", "/var/lib/cni", "/etc/cni"}

// ErrUnavailable says why the machine cannot run a real node.
var ErrUnavailable = errors.New("a real node cannot run here")

// Available reports why this machine cannot run a real node, or nil.
func Available(assets string) error {
	if err := containerd.Available(); err != nil {
		return fmt.Errorf("%w: %v", ErrUnavailable, err)
	}
	for _, b := range []string{"kubelet", "kube-proxy", "kube-controller-manager", "kube-scheduler"} {
		if _, err := os.Stat(filepath.Join(assets, b)); err != nil {
			return fmt.Errorf("%w: %s is not built in %s (make node builds it)", ErrUnavailable, b, assets)
		}
	}
	for _, p := range []string{filepath.Join(cniBinDir, "bridge"), filepath.Join(cniBinDir, "host-local")} {
		if _, err := os.Stat(p); err != nil {
			return fmt.Errorf("%w: %s is missing (apt-get install -y containernetworking-plugins)", ErrUnavailable, p)
		}
	}
	for _, tool := range []string{"ip", "iptables", "ip6tables", "conntrack"} {
		if _, err := exec.LookPath(tool); err != nil {
			return fmt.Errorf("%w: %s is missing (apt-get install -y iproute2 iptables conntrack)", ErrUnavailable, tool)
		}
	}
	if _, err := os.Stat("/sys/fs/cgroup"); err != nil {
		return fmt.Errorf("%w: no cgroups at /sys/fs/cgroup", ErrUnavailable)
	}
	return nil
}

// Options say where the binaries are and where the node keeps its files.
type Options struct {
	// AssetsDir holds etcd, kube-apiserver, kube-controller-manager,
	// kube-scheduler and kubelet.
	AssetsDir string
	// CRDDir holds CRD manifests to install.
	CRDDir string
	// WorkDir receives the kubeconfigs, the configs, the logs and the
	// kubelet's and containerd's state. Keep it short: containerd's socket
	// lies in it (a socket path has at most 107 bytes).
	WorkDir string
	// Images are image archives to import (make image writes one).
	Images []string
}

// Node is a running cluster of one real node.
type Node struct {
	// Config talks to the API server as an administrator.
	Config *rest.Config
	// KubeconfigPath is the admin kubeconfig, for kubectl.
	KubeconfigPath string
	// Containerd is the node's container runtime.
	Containerd *containerd.Daemon
	// Timings are how long the parts took to start.
	Timings map[string]time.Duration

	dir   string
	env   *controlplane.Env
	procs []*proc.Proc
	rec   *record
	lock  *os.File
}

// lockPath is the machine-wide lock a running node holds.
const lockPath = "/run/plumbline-node.lock"

// lockMachine waits until no other node runs on this machine and takes
// the lock; the kernel releases it when the process ends, so a crashed
// test does not hold it.
func lockMachine(ctx context.Context) (*os.File, error) {
	f, err := os.OpenFile(lockPath, os.O_CREATE|os.O_RDWR, 0o644)
	if err != nil {
		return nil, fmt.Errorf("open the node lock: %w", err)
	}
	for {
		err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB)
		if err == nil {
			return f, nil
		}
		if !errors.Is(err, syscall.EWOULDBLOCK) {
			f.Close()
			return nil, fmt.Errorf("take the node lock %s: %w", lockPath, err)
		}
		select {
		case <-ctx.Done():
			f.Close()
			return nil, fmt.Errorf("waiting for another real node on this machine to stop (%s): %w", lockPath, ctx.Err())
		case <-time.After(500 * time.Millisecond):
		}
	}
}

// recordPath is where a start records what it created on the host, at a
// fixed place (one node per machine at a time), so the next start cleans up
// after a test that crashed, whatever its directory was.
const recordPath = "/run/plumbline-node.json"

// record is what a start created on the host.
type record struct {
	path    string
	Dir     string   `json:"dir"`
	Bridge  bool     `json:"bridge"`
	Created []string `json:"created"`
	// Proxy is the kube-proxy binary whose rules to clean up.
	Proxy string `json:"proxy,omitempty"`
	// Rule is the nat rule that leads the kubernetes Service to the API
	// server on loopback (iptables arguments after the chain).
	Rule []string `json:"rule,omitempty"`
	// Chains are the kubelet's iptables chains ("tool table chain") that
	// were not there before the start.
	Chains []string `json:"chains,omitempty"`
	// Sysctls are the kernel settings the kubelet and kube-proxy change,
	// with their values before the start.
	Sysctls map[string]string `json:"sysctls,omitempty"`
}

// changedSysctls are the settings the kubelet sets for itself (its
// defaults for overcommit and panics) and kube-proxy for conntrack; they
// are put back at stop.
var changedSysctls = []string{
	"vm/overcommit_memory", "vm/panic_on_oom", "kernel/panic", "kernel/panic_on_oops",
	"kernel/keys/root_maxkeys", "kernel/keys/root_maxbytes",
	"net/netfilter/nf_conntrack_max", "net/netfilter/nf_conntrack_tcp_timeout_established",
	"net/netfilter/nf_conntrack_tcp_timeout_close_wait",
}

// readSysctls reads the settings that can be read here.
func readSysctls() map[string]string {
	out := map[string]string{}
	for _, k := range changedSysctls {
		if b, err := os.ReadFile("/proc/sys/" + k); err == nil {
			out[k] = strings.TrimSpace(string(b))
		}
	}
	return out
}

// kubeletChains are the chains the kubelet makes in each table, with
// the jumps to KUBE-FIREWALL from INPUT and OUTPUT in filter.
var kubeletChains = []struct{ table, chain string }{
	{"nat", "KUBE-KUBELET-CANARY"}, {"filter", "KUBE-KUBELET-CANARY"}, {"mangle", "KUBE-KUBELET-CANARY"},
	{"filter", "KUBE-FIREWALL"}, {"mangle", "KUBE-IPTABLES-HINT"},
}

// newChains lists the kubelet's chains missing now, for both IP versions.
func newChains() []string {
	var out []string
	for _, tool := range []string{"iptables", "ip6tables"} {
		for _, c := range kubeletChains {
			if exec.Command(tool, "-t", c.table, "-S", c.chain).Run() != nil {
				out = append(out, tool+" "+c.table+" "+c.chain)
			}
		}
	}
	return out
}

// removeChains removes chains a start made, with the jumps to them.
func removeChains(chains []string) {
	for _, c := range chains {
		f := strings.Fields(c)
		if len(f) != 3 {
			continue
		}
		tool, table, chain := f[0], f[1], f[2]
		for _, from := range []string{"INPUT", "OUTPUT", "FORWARD", "PREROUTING", "POSTROUTING"} {
			for exec.Command(tool, "-t", table, "-D", from, "-j", chain).Run() == nil {
			}
		}
		_ = exec.Command(tool, "-t", table, "-F", chain).Run()
		_ = exec.Command(tool, "-t", table, "-X", chain).Run()
	}
}

func (r *record) save() error {
	b, err := json.Marshal(r)
	if err != nil {
		return err
	}
	return os.WriteFile(r.path, b, 0o600)
}

// Start starts the node and waits until it is Ready and the images are
// imported. It removes first what an earlier start in the same directory
// left behind.
func Start(ctx context.Context, o Options) (*Node, error) {
	if err := Available(o.AssetsDir); err != nil {
		return nil, err
	}
	if err := os.MkdirAll(o.WorkDir, 0o755); err != nil {
		return nil, err
	}
	// One node per machine at a time (test packages run in parallel):
	// wait for the lock before touching what another start recorded.
	lock, err := lockMachine(ctx)
	if err != nil {
		return nil, err
	}
	cleanupStale(recordPath)
	n := &Node{dir: o.WorkDir, Timings: map[string]time.Duration{}, rec: &record{path: recordPath, Dir: o.WorkDir}, lock: lock}
	fail := func(err error) (*Node, error) {
		n.Stop()
		return nil, err
	}
	t0 := time.Now()

	// The bridge first: it is the node's IP and the pods' network.
	n.rec.Chains = newChains()
	n.rec.Sysctls = readSysctls()
	for _, p := range kubeletHostPaths {
		if _, err := os.Stat(p); errors.Is(err, os.ErrNotExist) {
			n.rec.Created = append(n.rec.Created, p)
		}
	}
	if err := ipCmd("link", "add", Bridge, "type", "bridge"); err != nil {
		return fail(err)
	}
	n.rec.Bridge = true
	if err := n.rec.save(); err != nil {
		return fail(err)
	}
	if err := ipCmd("addr", "add", BridgeIP+"/16", "dev", Bridge); err != nil {
		return fail(err)
	}
	if err := ipCmd("link", "set", Bridge, "up"); err != nil {
		return fail(err)
	}
	// A pod reaches another pod's Service through the node: the packet
	// comes in on the bridge, is led to the pod by kube-proxy's rules and
	// goes out on the bridge again. Forwarding is turned on for the bridge
	// alone (packets that come in elsewhere are not forwarded), and goes
	// with it at stop.
	if err := os.WriteFile("/proc/sys/net/ipv4/conf/"+Bridge+"/forwarding", []byte("1"), 0o644); err != nil {
		return fail(fmt.Errorf("turn on forwarding on the bridge: %w", err))
	}

	kc := filepath.Join(o.WorkDir, "admin.kubeconfig")
	cp := filepath.Join(o.WorkDir, "cp")
	servingCA, err := writeServingCerts(filepath.Join(cp, "apiserver"))
	if err != nil {
		return fail(err)
	}
	// The control plane's files under the work directory: a crashed test's
	// API server and etcd are found by it (cleanupStale). Pods get
	// service-account tokens (the admission plugin the test control plane
	// turns off is on) and reach the API server as the kubernetes Service.
	env, err := controlplane.Start(controlplane.Options{AssetsDir: o.AssetsDir, CRDDir: o.CRDDir, KubeconfigPath: kc, Dir: cp, ServingCA: servingCA,
		APIServerArgs: map[string]string{
			"authorization-mode":              "Node,RBAC",
			"kubelet-preferred-address-types": "Hostname,InternalIP",
			"kubelet-client-certificate":      filepath.Join(cp, "apiserver", kubeletClientCert),
			"kubelet-client-key":              filepath.Join(cp, "apiserver", kubeletClientKey),
			"allow-privileged":                "true",
			"disable-admission-plugins":       "",
		}})
	if err != nil {
		return fail(err)
	}
	n.env, n.Config, n.KubeconfigPath = env, env.Config, kc
	n.Timings["control plane"] = time.Since(t0)
	ca := filepath.Join(o.WorkDir, "ca.crt")
	if err := os.WriteFile(ca, env.CA(), 0o644); err != nil {
		return fail(err)
	}
	auth := []string{"--kubeconfig=" + kc, "--authentication-kubeconfig=" + kc, "--authorization-kubeconfig=" + kc,
		"--leader-elect=false", "--secure-port=0"}
	if err := n.run(o.AssetsDir, "kube-controller-manager", append(auth,
		"--root-ca-file="+ca, "--service-account-private-key-file="+filepath.Join(env.CertDir(), "sa-signer.key"),
		"--use-service-account-credentials=false")); err != nil {
		return fail(err)
	}
	if err := n.run(o.AssetsDir, "kube-scheduler", auth); err != nil {
		return fail(err)
	}

	// containerd with the CRI plugin, as the kubelet's runtime.
	t1 := time.Now()
	cniConf := filepath.Join(o.WorkDir, "cni")
	if err := writeCNI(cniConf, o.WorkDir); err != nil {
		return fail(err)
	}
	d, err := containerd.StartWithConfig(filepath.Join(o.WorkDir, "ctr"), func(root, state, socket string) string {
		return criConfig(root, state, socket, cniConf)
	})
	if err != nil {
		return fail(err)
	}
	n.Containerd = d
	if err := n.importImages(ctx, o); err != nil {
		return fail(err)
	}
	n.Timings["containerd and images"] = time.Since(t1)

	t2 := time.Now()
	if err := n.startKubelet(o, d.Socket); err != nil {
		return fail(err)
	}
	if err := n.waitReady(ctx); err != nil {
		return fail(err)
	}
	n.Timings["kubelet to node Ready"] = time.Since(t2)
	// kube-proxy once the node is there: it waits for its Node object.
	t3 := time.Now()
	if err := n.startProxy(o, kc); err != nil {
		return fail(err)
	}
	n.Timings["kube-proxy's rules"] = time.Since(t3)
	n.Timings["whole start"] = time.Since(t0)
	return n, nil
}

func ipCmd(args ...string) error {
	if out, err := exec.Command("ip", args...).CombinedOutput(); err != nil {
		return fmt.Errorf("ip %s: %w: %s", strings.Join(args, " "), err, out)
	}
	return nil
}

// writeCNI writes the bridge network: the node's bridge, no gateway and no
// masquerade (pods talk to each other and to the node, nothing else).
func writeCNI(dir, work string) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	conf := map[string]any{
		"cniVersion": "0.4.0",
		"name":       "plumbline",
		"plugins": []any{map[string]any{
			"type": "bridge", "bridge": Bridge, "isGateway": false, "ipMasq": false, "hairpinMode": true,
			"ipam": map[string]any{"type": "host-local", "dataDir": filepath.Join(work, "cni-ipam"),
				"ranges": []any{[]any{map[string]any{"subnet": podCIDR, "rangeStart": "10.88.1.1", "rangeEnd": "10.88.255.254"}}},
				// Services through the node, where kube-proxy's rules are.
				"routes": []any{map[string]any{"dst": serviceCIDR, "gw": BridgeIP}}},
		}},
	}
	b, err := json.MarshalIndent(conf, "", "  ")
	if err != nil {
		return err
	}
	return os.WriteFile(filepath.Join(dir, "10-plumbline.conflist"), b, 0o644)
}

// criConfig is containerd's configuration for a node on this machine
// (see DESIGN.md, "A real node"): overlayfs, runc without systemd cgroups,
// oom_score_adj restricted (no CAP_SYS_RESOURCE here), no AppArmor, network
// namespaces under its own state directory, the CNI plugins of Debian.
func criConfig(root, state, socket, cniConf string) string {
	return fmt.Sprintf(`version = 2
root = %q
state = %q
[grpc]
  address = %q
[plugins."io.containerd.grpc.v1.cri"]
  sandbox_image = %q
  restrict_oom_score_adj = true
  disable_apparmor = true
  netns_mounts_under_state_dir = true
  [plugins."io.containerd.grpc.v1.cri".containerd]
    snapshotter = "overlayfs"
    default_runtime_name = "runc"
    [plugins."io.containerd.grpc.v1.cri".containerd.runtimes.runc]
      runtime_type = "io.containerd.runc.v2"
      [plugins."io.containerd.grpc.v1.cri".containerd.runtimes.runc.options]
        SystemdCgroup = false
  [plugins."io.containerd.grpc.v1.cri".cni]
    bin_dir = %q
    conf_dir = %q
`, root, state, socket, PauseImage, cniBinDir, cniConf)
}

// importImages builds the pause image and imports it with the given
// archives.
func (n *Node) importImages(ctx context.Context, o Options) error {
	dir := filepath.Join(o.WorkDir, "images")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	bin := filepath.Join(dir, "pause")
	build := exec.CommandContext(ctx, "go", "build", "-o", bin, "./internal/testenv/node/pause")
	build.Dir = moduleRoot()
	build.Env = append(os.Environ(), "CGO_ENABLED=0")
	if out, err := build.CombinedOutput(); err != nil {
		return fmt.Errorf("build the pause program: %w: %s", err, out)
	}
	pause := filepath.Join(dir, "pause.tar")
	if _, err := image.WriteFile(pause, PauseImage, image.Spec{Binary: bin, Path: "/pause", CACerts: filepath.Join(o.WorkDir, "ca.crt"), Arch: runtime.GOARCH, Version: "1"}); err != nil {
		return err
	}
	for _, a := range append([]string{pause}, o.Images...) {
		if _, err := n.Containerd.Import(ctx, a); err != nil {
			return err
		}
	}
	return nil
}

// moduleRoot is the repository root, from this file's place in it.
func moduleRoot() string {
	_, file, _, _ := runtime.Caller(0)
	return filepath.Join(filepath.Dir(file), "..", "..", "..")
}

func (n *Node) startKubelet(o Options, socket string) error {
	dir := filepath.Join(o.WorkDir, "kubelet")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	kc := filepath.Join(o.WorkDir, "kubelet.kubeconfig")
	if err := n.env.KubeconfigFor(kc, "system:node:"+Name, "system:nodes"); err != nil {
		return err
	}
	config := fmt.Sprintf(`apiVersion: kubelet.config.k8s.io/v1beta1
kind: KubeletConfiguration
address: 127.0.0.1
port: 10250
readOnlyPort: 0
healthzPort: 0
failCgroupV1: false
cgroupDriver: cgroupfs
failSwapOn: false
containerRuntimeEndpoint: unix://%s
authentication:
  anonymous:
    enabled: false
  webhook:
    enabled: false
  x509:
    clientCAFile: %s
authorization:
  mode: AlwaysAllow
podCIDR: %s
resolvConf: ""
imageGCHighThresholdPercent: 100
imageGCLowThresholdPercent: 99
evictionHard:
  memory.available: "1Mi"
  nodefs.available: "1%%"
  imagefs.available: "1%%"
serializeImagePulls: false
`, socket, filepath.Join(o.WorkDir, "ca.crt"), podCIDR)
	cfg := filepath.Join(o.WorkDir, "kubelet-config.yaml")
	if err := os.WriteFile(cfg, []byte(config), 0o644); err != nil {
		return err
	}
	return n.run(o.AssetsDir, "kubelet", []string{"--config=" + cfg, "--kubeconfig=" + kc, "--root-dir=" + dir,
		"--cert-dir=" + filepath.Join(dir, "pki"), "--hostname-override=" + Name, "--node-ip=" + BridgeIP, "--v=1"})
}

func (n *Node) waitReady(ctx context.Context) error {
	cs, err := kubernetes.NewForConfig(n.Config)
	if err != nil {
		return err
	}
	return wait.PollUntilContextTimeout(ctx, 200*time.Millisecond, 2*time.Minute, true, func(ctx context.Context) (bool, error) {
		node, err := cs.CoreV1().Nodes().Get(ctx, Name, metav1.GetOptions{})
		if err != nil {
			return false, nil
		}
		for _, c := range node.Status.Conditions {
			if c.Type == corev1.NodeReady && c.Status == corev1.ConditionTrue {
				return true, nil
			}
		}
		return false, nil
	})
}

func (n *Node) run(assets, name string, args []string) error {
	p, err := proc.Start(filepath.Join(assets, name), args, filepath.Join(n.dir, name+".log"))
	if err != nil {
		return err
	}
	n.procs = append(n.procs, p)
	return nil
}

// Stop stops the kubelet, the pods' containers, containerd, the controllers
// and the control plane, and removes from the host what the start created.
func (n *Node) Stop() {
	for i := len(n.procs) - 1; i >= 0; i-- {
		n.procs[i].Stop(10 * time.Second)
	}
	if d := n.Containerd; d != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		// The pods' containers outlive the kubelet: end them first.
		if out, err := d.Ctr(ctx, "tasks", "ls", "-q"); err == nil {
			for _, id := range strings.Fields(out) {
				_, _ = d.Ctr(ctx, "tasks", "kill", "-s", "SIGKILL", id)
			}
		}
		cancel()
		d.Stop()
	}
	killPods()
	if n.env != nil {
		_ = n.env.Stop()
	}
	if n.rec != nil {
		undo(n.rec, n.dir)
	}
	if n.lock != nil {
		n.lock.Close() // releases the lock
		n.lock = nil
	}
}

// undo removes what a start recorded: mounts under its directory, the
// bridge, and the host paths it created.
func undo(r *record, dir string) {
	unmountUnder(dir)
	if r.Proxy != "" {
		_ = exec.Command(r.Proxy, "--cleanup").Run()
	}
	if len(r.Rule) > 0 {
		_ = exec.Command("iptables", append([]string{"-t", "nat", "-D", "PREROUTING"}, r.Rule...)...).Run()
	}
	removeChains(r.Chains)
	for k, v := range r.Sysctls {
		_ = os.WriteFile("/proc/sys/"+k, []byte(v), 0o644)
	}
	if r.Bridge {
		_ = ipCmd("link", "del", Bridge)
	}
	for _, p := range r.Created {
		unmountUnder(p)
		_ = os.RemoveAll(p)
	}
	_ = os.Remove(r.path)
}

// cleanupStale undoes what an earlier start recorded and did not undo (its
// test crashed): it stops that start's processes (their command lines name
// its directory), then removes what it created.
func cleanupStale(path string) {
	b, err := os.ReadFile(path)
	if err != nil {
		return
	}
	var r record
	if json.Unmarshal(b, &r) != nil || r.Dir == "" {
		_ = os.Remove(path)
		return
	}
	r.path = path
	_ = exec.Command("pkill", "-KILL", "-f", r.Dir).Run()
	// The pods' processes do not name the directory, and outlive their
	// shims: they are found by the kubelet's cgroups.
	killPods()
	time.Sleep(200 * time.Millisecond)
	undo(&r, r.Dir)
	_ = os.RemoveAll(r.Dir)
}

// podsCgroup is where the kubelet (cgroupfs driver) puts the pods'
// processes, under each cgroup hierarchy; only the node's kubelet uses it.
const podsCgroup = "kubepods"

// killPods kills every process left in the kubelet's pod cgroups.
func killPods() {
	roots, _ := filepath.Glob(filepath.Join("/sys/fs/cgroup", "*", podsCgroup))
	if _, err := os.Stat(filepath.Join("/sys/fs/cgroup", podsCgroup)); err == nil {
		roots = append(roots, filepath.Join("/sys/fs/cgroup", podsCgroup)) // a unified hierarchy alone
	}
	for _, root := range roots {
		_ = filepath.WalkDir(root, func(p string, d os.DirEntry, err error) error {
			if err != nil || d.IsDir() || d.Name() != "cgroup.procs" {
				return nil
			}
			b, err := os.ReadFile(p)
			if err != nil {
				return nil
			}
			for _, f := range strings.Fields(string(b)) {
				if pid, err := strconv.Atoi(f); err == nil && pid > 1 {
					_ = syscall.Kill(pid, syscall.SIGKILL)
				}
			}
			return nil
		})
	}
}

// unmountUnder unmounts every mount below dir, deepest first.
func unmountUnder(dir string) {
	b, err := os.ReadFile("/proc/self/mounts")
	if err != nil {
		return
	}
	var under []string
	for _, l := range strings.Split(string(b), "\n") {
		if f := strings.Fields(l); len(f) > 1 && strings.HasPrefix(f[1], strings.TrimSuffix(dir, "/")+"/") {
			under = append(under, f[1])
		}
	}
	for i := len(under) - 1; i >= 0; i-- {
		_ = syscall.Unmount(under[i], syscall.MNT_DETACH)
	}
}

// startProxy runs kube-proxy (iptables mode), so pods reach Services; the
// kubernetes Service's endpoint is the API server on 127.0.0.1, which a
// packet from the bridge may be routed to only with route_localnet on it.
func (n *Node) startProxy(o Options, kc string) error {
	bin := filepath.Join(o.AssetsDir, "kube-proxy")
	u, err := url.Parse(n.Config.Host)
	if err != nil {
		return err
	}
	// The API server listens on loopback only, and an Endpoints address
	// may not be a loopback one (the test control plane advertises a
	// documentation address): one rule before kube-proxy's leads the
	// kubernetes Service from the bridge to it.
	n.rec.Proxy = bin
	n.rec.Rule = []string{"-i", Bridge, "-d", serviceIP + "/32", "-p", "tcp", "--dport", "443", "-j", "DNAT", "--to-destination", "127.0.0.1:" + u.Port()}
	if err := n.rec.save(); err != nil {
		return err
	}
	if err := os.WriteFile("/proc/sys/net/ipv4/conf/"+Bridge+"/route_localnet", []byte("1"), 0o644); err != nil {
		return fmt.Errorf("route_localnet on %s: %w", Bridge, err)
	}
	if err := n.run(o.AssetsDir, "kube-proxy", []string{"--kubeconfig=" + kc, "--hostname-override=" + Name, "--proxy-mode=iptables",
		"--cluster-cidr=" + podCIDR, "--conntrack-max-per-core=0", "--healthz-bind-address=127.0.0.1:10256", "--metrics-bind-address=127.0.0.1:10249",
		"--nodeport-addresses=" + BridgeIP + "/32", "--v=1"}); err != nil {
		return err
	}
	// Ours goes before kube-proxy's jump, once that is there (kube-proxy
	// keeps its jump where it is once made).
	portals := []string{"-t", "nat", "-C", "PREROUTING", "-m", "comment", "--comment", "kubernetes service portals", "-j", "KUBE-SERVICES"}
	deadline := time.Now().Add(30 * time.Second)
	for exec.Command("iptables", portals...).Run() != nil {
		if time.Now().After(deadline) {
			return fmt.Errorf("kube-proxy made no rules within 30s (log: %s)", filepath.Join(n.dir, "kube-proxy.log"))
		}
		time.Sleep(200 * time.Millisecond)
	}
	if out, err := exec.Command("iptables", append([]string{"-t", "nat", "-I", "PREROUTING", "1"}, n.rec.Rule...)...).CombinedOutput(); err != nil {
		return fmt.Errorf("iptables: %w: %s", err, out)
	}
	return nil
}
