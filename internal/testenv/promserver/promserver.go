// Package promserver runs a real Prometheus server (Debian's prometheus
// package) on loopback with a history written beforehand: samples are
// written as OpenMetrics text, turned into TSDB blocks with `promtool tsdb
// create-blocks-from openmetrics`, and served. The API-server tests and the
// demo query it as the controller would query a cluster's Prometheus.
package promserver

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strings"
	"syscall"
	"time"
)

// Series is one labelled series of samples to write into the history.
type Series struct {
	Name    string
	Labels  map[string]string
	Samples []Sample
}

// Sample is a value at a time.
type Sample struct {
	T time.Time
	V float64
}

// ErrNotInstalled means prometheus or promtool is not on the PATH.
var ErrNotInstalled = errors.New("prometheus and promtool are not installed (apt-get install -y prometheus)")

// Server is a running Prometheus.
type Server struct {
	// URL is the server's address, for example http://127.0.0.1:41234.
	URL  string
	dir  string
	addr string
	cmd  *exec.Cmd
	log  *os.File
}

// Start writes the history into a new TSDB under dir and starts a server on
// a free loopback port.
func Start(dir string, history []Series) (*Server, error) {
	return start(dir, history, "global:\n  scrape_interval: 1m\n")
}

// StartScraping starts a server under dir that scrapes targets (host:port
// of /metrics endpoints) every interval, with no history before.
func StartScraping(dir string, interval time.Duration, targets ...string) (*Server, error) {
	var b strings.Builder
	fmt.Fprintf(&b, "global:\n  scrape_interval: %s\n  scrape_timeout: %s\nscrape_configs:\n  - job_name: demo\n    static_configs:\n      - targets:\n",
		interval, interval)
	for _, t := range targets {
		fmt.Fprintf(&b, "          - %q\n", t)
	}
	return start(dir, nil, b.String())
}

func start(dir string, history []Series, config string) (*Server, error) {
	_, err1 := exec.LookPath("prometheus")
	_, err2 := exec.LookPath("promtool")
	if err1 != nil || err2 != nil {
		return nil, ErrNotInstalled
	}
	data := filepath.Join(dir, "data")
	if err := os.MkdirAll(data, 0o755); err != nil {
		return nil, err
	}
	if len(history) > 0 {
		if err := backfill(dir, data, history); err != nil {
			return nil, err
		}
	}
	if err := os.WriteFile(filepath.Join(dir, "prometheus.yml"), []byte(config), 0o644); err != nil {
		return nil, err
	}
	addr, err := FreeLoopbackAddr()
	if err != nil {
		return nil, err
	}
	s := &Server{URL: "http://" + addr, dir: dir, addr: addr}
	return s, s.start()
}

// backfill writes the history as OpenMetrics and creates blocks from it.
func backfill(dir, data string, history []Series) error {
	path := filepath.Join(dir, "history.om")
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	w := bufio.NewWriter(f)
	if err := WriteOpenMetrics(w, history); err != nil {
		f.Close()
		return err
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	out, err := exec.Command("promtool", "tsdb", "create-blocks-from", "openmetrics", path, data).CombinedOutput()
	if err != nil {
		return fmt.Errorf("promtool tsdb create-blocks-from openmetrics: %w\n%s", err, out)
	}
	return nil
}

// WriteOpenMetrics writes series in the OpenMetrics text format promtool
// backfills from: one family per metric name, samples in time order.
func WriteOpenMetrics(w io.Writer, history []Series) error {
	byName := map[string][]Series{}
	var names []string
	for _, s := range history {
		if _, ok := byName[s.Name]; !ok {
			names = append(names, s.Name)
		}
		byName[s.Name] = append(byName[s.Name], s)
	}
	sort.Strings(names)
	for _, name := range names {
		if _, err := fmt.Fprintf(w, "# TYPE %s gauge\n", name); err != nil {
			return err
		}
		for _, s := range byName[name] {
			labels := formatLabels(s.Labels)
			samples := append([]Sample(nil), s.Samples...)
			sort.Slice(samples, func(i, j int) bool { return samples[i].T.Before(samples[j].T) })
			for _, p := range samples {
				if _, err := fmt.Fprintf(w, "%s%s %v %d\n", name, labels, p.V, p.T.Unix()); err != nil {
					return err
				}
			}
		}
	}
	_, err := fmt.Fprintln(w, "# EOF")
	return err
}

func formatLabels(l map[string]string) string {
	if len(l) == 0 {
		return ""
	}
	keys := make([]string, 0, len(l))
	for k := range l {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = fmt.Sprintf("%s=%q", k, l[k])
	}
	return "{" + strings.Join(parts, ",") + "}"
}

func (s *Server) start() error {
	log, err := os.Create(filepath.Join(s.dir, "prometheus.log"))
	if err != nil {
		return err
	}
	s.log = log
	s.cmd = exec.Command("prometheus",
		"--config.file="+filepath.Join(s.dir, "prometheus.yml"),
		"--storage.tsdb.path="+filepath.Join(s.dir, "data"),
		"--storage.tsdb.retention.time=100y",
		"--web.listen-address="+s.addr,
		"--log.level=warn")
	s.cmd.Stdout, s.cmd.Stderr = log, log
	if err := s.cmd.Start(); err != nil {
		return fmt.Errorf("start prometheus: %w", err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	for {
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, s.URL+"/-/ready", nil)
		resp, err := http.DefaultClient.Do(req)
		if err == nil {
			resp.Body.Close()
			if resp.StatusCode == http.StatusOK {
				return nil
			}
		}
		select {
		case <-ctx.Done():
			_ = s.Stop()
			return fmt.Errorf("prometheus did not become ready on %s (log: %s)", s.addr, log.Name())
		case <-time.After(100 * time.Millisecond):
		}
	}
}

// PID is the server process's id, 0 when it is not running.
func (s *Server) PID() int {
	if s.cmd == nil || s.cmd.Process == nil {
		return 0
	}
	return s.cmd.Process.Pid
}

// Pause freezes the server (SIGSTOP): it still accepts connections, as a
// hung server does, but answers nothing until Resume.
func (s *Server) Pause() error {
	if s.cmd == nil || s.cmd.Process == nil {
		return errors.New("prometheus is not running")
	}
	if err := s.cmd.Process.Signal(syscall.SIGSTOP); err != nil {
		return fmt.Errorf("pause prometheus: %w", err)
	}
	return nil
}

// Resume lets a paused server go on (SIGCONT).
func (s *Server) Resume() error {
	if s.cmd == nil || s.cmd.Process == nil {
		return errors.New("prometheus is not running")
	}
	if err := s.cmd.Process.Signal(syscall.SIGCONT); err != nil {
		return fmt.Errorf("resume prometheus: %w", err)
	}
	return nil
}

// Stop stops the server and waits for it to exit. The data stays.
func (s *Server) Stop() error {
	if s.cmd == nil || s.cmd.Process == nil {
		return nil
	}
	_ = s.cmd.Process.Signal(syscall.SIGCONT) // a paused server cannot stop
	_ = s.cmd.Process.Signal(os.Interrupt)
	done := make(chan error, 1)
	go func() { done <- s.cmd.Wait() }()
	select {
	case <-done:
	case <-time.After(20 * time.Second):
		_ = s.cmd.Process.Kill()
		<-done
	}
	s.cmd = nil
	if s.log != nil {
		s.log.Close()
	}
	return nil
}

// Restart starts the stopped server again on the same port with the same
// data.
func (s *Server) Restart() error {
	if s.cmd != nil {
		return errors.New("prometheus is running")
	}
	return s.start()
}

// FreeLoopbackAddr is a loopback address with a port free at the moment of
// asking, for a server about to start.
func FreeLoopbackAddr() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", fmt.Errorf("find a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().String(), nil
}
