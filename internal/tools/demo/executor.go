package demo

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"time"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/client"

	"plumbline.dev/plumbline/internal/contract/termination"
	"plumbline.dev/plumbline/internal/testenv/simcluster"
)

// executor exists for the demo only. The simulated cluster's nodes are kwok's:
// they run no containers. The executor plays the container runtime for the
// demo's Job pods: when a pod is Running on a kwok node it runs the pod's
// containers (init containers first, in order) as local processes of the
// plumbline binary, then reports the exit code and the last container's
// termination message through two pod annotations, which kwok's
// plumbline-pod-finish stage turns into the containers' terminated state.
// The real Job controller then completes the Job or retries it. In a cluster
// the kubelet runs the Jobs' containers and none of this exists.
type executor struct {
	c      client.Client
	ns     string
	binary string // the plumbline binary
	dir    string // each pod gets a working directory here (its emptyDir)
	say    func(string)

	mu      sync.Mutex
	started map[types.UID]bool
	// runs counts the pods run per Job.
	runs map[string]int
}

func newExecutor(c client.Client, ns, binary, dir string, say func(string)) *executor {
	return &executor{c: c, ns: ns, binary: binary, dir: dir, say: say, started: map[types.UID]bool{}, runs: map[string]int{}}
}

// run polls the namespace's Job pods until ctx ends.
func (e *executor) run(ctx context.Context) {
	var wg sync.WaitGroup
	defer wg.Wait()
	for {
		var pods corev1.PodList
		err := e.c.List(ctx, &pods, client.InNamespace(e.ns), client.HasLabels{"batch.kubernetes.io/job-name"})
		if err == nil {
			for i := range pods.Items {
				p := pods.Items[i]
				if p.Status.Phase != corev1.PodRunning || p.DeletionTimestamp != nil || p.Annotations[simcluster.ExitCodeAnnotation] != "" {
					continue
				}
				e.mu.Lock()
				if e.started[p.UID] {
					e.mu.Unlock()
					continue
				}
				e.started[p.UID] = true
				e.runs[p.Labels["batch.kubernetes.io/job-name"]]++
				e.mu.Unlock()
				wg.Add(1)
				go func() {
					defer wg.Done()
					e.runPod(ctx, &p)
				}()
			}
		}
		select {
		case <-ctx.Done():
			return
		case <-time.After(250 * time.Millisecond):
		}
	}
}

// podRuns is how many pods the executor ran per Job.
func (e *executor) podRuns() map[string]int {
	e.mu.Lock()
	defer e.mu.Unlock()
	return maps.Clone(e.runs)
}

func (e *executor) runPod(ctx context.Context, p *corev1.Pod) {
	dir := filepath.Join(e.dir, p.Name)
	code, msg := 0, ""
	if err := os.MkdirAll(dir, 0o755); err != nil {
		code, msg = 1, err.Error()
	}
	containers := append(append([]corev1.Container(nil), p.Spec.InitContainers...), p.Spec.Containers...)
	for i, c := range containers {
		if code != 0 {
			break
		}
		last := i == len(containers)-1
		code, msg = e.runContainer(ctx, dir, &c)
		if !last && code == 0 {
			msg = ""
		}
	}
	if ctx.Err() != nil {
		return
	}
	if len(msg) > termination.MaxBytes {
		msg = msg[:termination.MaxBytes] // the kubelet truncates too
	}
	patch, _ := json.Marshal(map[string]any{"metadata": map[string]any{"annotations": map[string]string{
		simcluster.ExitCodeAnnotation: fmt.Sprint(code),
		simcluster.MessageAnnotation:  msg,
	}}})
	if err := e.c.Patch(ctx, p, client.RawPatch(types.MergePatchType, patch)); err != nil {
		e.say(fmt.Sprintf("(executor) could not report pod %s: %v", p.Name, err))
	}
}

// runContainer runs one container's command and returns its exit code and
// termination message (the file the tool wrote, else on failure the last
// line it printed, as terminationMessagePolicy FallbackToLogsOnError does).
func (e *executor) runContainer(ctx context.Context, dir string, c *corev1.Container) (int, string) {
	env := map[string]string{}
	var envList []string
	for _, v := range c.Env {
		if v.ValueFrom != nil {
			return 1, fmt.Sprintf("the demo executor cannot resolve valueFrom for env %s", v.Name)
		}
		val := expand(v.Value, env)
		env[v.Name] = val
		envList = append(envList, v.Name+"="+val)
	}
	argv := append(append([]string(nil), c.Command...), c.Args...)
	switch {
	case len(c.Command) == 0:
		// The image's entrypoint is the plumbline binary (see the Dockerfile).
	case filepath.Base(c.Command[0]) == "plumbline":
		argv = argv[1:]
	default:
		return 127, fmt.Sprintf("the demo executor runs only the plumbline binary, not %q", c.Command[0])
	}
	for i := range argv {
		argv[i] = expand(argv[i], env)
	}
	termFile := filepath.Join(dir, c.Name+".termination-log")
	cmd := exec.CommandContext(ctx, e.binary, argv...)
	cmd.Dir = dir
	cmd.Env = append([]string{"PATH=" + os.Getenv("PATH"), "HOME=" + dir, termination.FileEnv + "=" + termFile}, envList...)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	err := cmd.Run()
	_ = os.WriteFile(filepath.Join(dir, c.Name+".log"), out.Bytes(), 0o644)
	code := 0
	if err != nil {
		code = 1
		var exit *exec.ExitError
		if errors.As(err, &exit) && exit.ExitCode() > 0 {
			code = exit.ExitCode()
		}
	}
	msg, _ := os.ReadFile(termFile)
	if len(msg) == 0 && code != 0 {
		lines := strings.Split(strings.TrimSpace(out.String()), "\n")
		msg = []byte(lines[len(lines)-1])
	}
	return code, string(msg)
}

var envRef = regexp.MustCompile(`\$\(([A-Za-z_][A-Za-z0-9_]*)\)`)

// expand replaces $(VAR) with the container's variables, as the kubelet
// does; unknown references stay as written.
func expand(s string, env map[string]string) string {
	return envRef.ReplaceAllStringFunc(s, func(m string) string {
		if v, ok := env[m[2:len(m)-1]]; ok {
			return v
		}
		return m
	})
}
