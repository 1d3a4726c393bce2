package demo

import (
	"context"
	"flag"
	"fmt"
	"io"
	"net"
	"slices"
	"strconv"
	"strings"
	"time"

	corev1 "k8s.io/api/core/v1"
	"k8s.io/apimachinery/pkg/labels"
	"sigs.k8s.io/controller-runtime/pkg/client"
	"sigs.k8s.io/controller-runtime/pkg/client/config"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// Targets is `plumbline demo targets`, a sidecar of the end-to-end suite's
// Prometheus: every second it lists the pods each --pods names and writes
// them as a Prometheus file_sd target file, labelled with their namespace,
// their name and the model version the controller stamped on them. It
// stands in for Prometheus' own Kubernetes discovery, which Debian's build
// of Prometheus leaves out; a Prometheus with it needs no sidecar.
func Targets(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("plumbline demo targets", flag.ContinueOnError)
	var specs []podSpec
	fs.Func("pods", "pods to scrape as NAMESPACE:SELECTOR:PORT, such as larkspur:app=late-risk-scorer:9100 (repeatable)", func(v string) error {
		p, err := parsePodSpec(v)
		if err == nil {
			specs = append(specs, p)
		}
		return err
	})
	out := fs.String("out", "/sd/targets.json", "the file_sd file to write")
	every := fs.Duration("every", time.Second, "how often to list the pods")
	if err := parse(fs, args, stderr); err != nil {
		return err
	}
	if len(specs) == 0 {
		fmt.Fprintln(stderr, "plumbline demo targets: --pods is required, such as --pods larkspur:app=late-risk-scorer:9100")
		return ErrUsage
	}
	cfg, err := config.GetConfig()
	if err != nil {
		return fmt.Errorf("reach the API server: %w", err)
	}
	c, err := client.New(cfg, client.Options{})
	if err != nil {
		return fmt.Errorf("reach the API server: %w", err)
	}
	fmt.Fprintf(stdout, "writing the scrape targets of %d pod selector(s) to %s every %s\n", len(specs), *out, *every)
	last := ""
	for {
		groups, err := listTargets(ctx, c, specs)
		if err != nil {
			// Keep the last file: Prometheus goes on scraping what it knew.
			fmt.Fprintf(stderr, "list pods: %v\n", err)
		} else if err := replaceJSON(*out, groups); err != nil {
			return err
		} else if s := fmt.Sprint(groups); s != last {
			last = s
			fmt.Fprintf(stdout, "%s %d target(s)\n", time.Now().UTC().Format(time.RFC3339), len(groups))
		}
		select {
		case <-ctx.Done():
			return nil
		case <-time.After(*every):
		}
	}
}

type podSpec struct {
	namespace string
	selector  labels.Selector
	port      int
}

func parsePodSpec(v string) (podSpec, error) {
	parts := strings.Split(v, ":")
	if len(parts) != 3 || parts[0] == "" {
		return podSpec{}, fmt.Errorf("want NAMESPACE:SELECTOR:PORT, such as larkspur:app=late-risk-scorer:9100")
	}
	sel, err := labels.Parse(parts[1])
	if err != nil {
		return podSpec{}, fmt.Errorf("selector %q: %w", parts[1], err)
	}
	port, err := strconv.Atoi(parts[2])
	if err != nil || port < 1 || port > 65535 {
		return podSpec{}, fmt.Errorf("port %q: want a number from 1 to 65535", parts[2])
	}
	return podSpec{namespace: parts[0], selector: sel, port: port}, nil
}

// targetGroup is one entry of a Prometheus file_sd file.
type targetGroup struct {
	Targets []string          `json:"targets"`
	Labels  map[string]string `json:"labels"`
}

// listTargets lists the running pods of each spec, in a stable order.
func listTargets(ctx context.Context, c client.Client, specs []podSpec) ([]targetGroup, error) {
	groups := []targetGroup{}
	for _, s := range specs {
		var pods corev1.PodList
		if err := c.List(ctx, &pods, client.InNamespace(s.namespace), client.MatchingLabelsSelector{Selector: s.selector}); err != nil {
			return nil, err
		}
		for _, p := range pods.Items {
			if p.Status.Phase != corev1.PodRunning || p.Status.PodIP == "" {
				continue
			}
			l := map[string]string{"namespace": p.Namespace, "pod": p.Name}
			if v := p.Annotations[v1alpha1.VersionAnnotation]; v != "" {
				l["version"] = v
			}
			groups = append(groups, targetGroup{Targets: []string{net.JoinHostPort(p.Status.PodIP, strconv.Itoa(s.port))}, Labels: l})
		}
	}
	slices.SortFunc(groups, func(a, b targetGroup) int { return strings.Compare(a.Targets[0], b.Targets[0]) })
	return groups, nil
}
