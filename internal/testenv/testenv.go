// Package testenv starts the real external servers sluice's tests run
// against, as separate processes on loopback: a MinIO object store and a
// NATS server with JetStream. It is imported only by tests.
//
// Binaries are found through an environment variable (SLUICE_MINIO_BIN,
// SLUICE_NATS_BIN), then PATH, then $(go env GOPATH)/bin. When a binary is
// missing the test is skipped, unless the environment variable CI is set, in
// which case it fails: CI must never pass by skipping its integration tests.
// Each server gets a temporary data directory and is stopped (SIGTERM, then
// SIGKILL) when the test ends; its log is printed when the test fails.
package testenv

import (
	"bytes"
	"context"

	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// readyTimeout bounds how long a server may take to come up; it is a
// liveness guard, not a performance check.
const readyTimeout = 90 * time.Second

// Missing skips t (CI unset) or fails it (CI set) because what is missing.
func Missing(t testing.TB, format string, args ...any) {
	t.Helper()
	msg := fmt.Sprintf(format, args...)
	if os.Getenv("CI") != "" {
		t.Fatalf("testenv: %s (CI is set, so this is a failure)", msg)
	}
	t.Skipf("testenv: %s (skipping; set CI to make this a failure)", msg)
}

// FindBinary returns the path of an executable named name, looked up via the
// environment variable envVar, PATH, and GOPATH/bin, or "" when none exists.
func FindBinary(name, envVar string) string {
	if p := os.Getenv(envVar); p != "" {
		if isExec(p) {
			return p
		}
		return ""
	}
	if p, err := exec.LookPath(name); err == nil {
		return p
	}
	var dirs []string
	if gobin := os.Getenv("GOBIN"); gobin != "" {
		dirs = append(dirs, gobin)
	}
	gopath := os.Getenv("GOPATH")
	if gopath == "" {
		if out, err := exec.Command("go", "env", "GOPATH").Output(); err == nil {
			gopath = strings.TrimSpace(string(out))
		}
	}
	for _, gp := range filepath.SplitList(gopath) {
		dirs = append(dirs, filepath.Join(gp, "bin"))
	}
	if home, err := os.UserHomeDir(); err == nil {
		dirs = append(dirs, filepath.Join(home, "go", "bin"))
	}
	for _, d := range dirs {
		if p := filepath.Join(d, name); isExec(p) {
			return p
		}
	}
	return ""
}

func isExec(p string) bool {
	fi, err := os.Stat(p)
	return err == nil && fi.Mode().IsRegular() && fi.Mode()&0o111 != 0
}

// requireBinary finds name or skips/fails t.
func requireBinary(t testing.TB, name, envVar, install string) string {
	t.Helper()
	p := FindBinary(name, envVar)
	if p == "" {
		Missing(t, "%s not found via $%s, PATH or GOPATH/bin (install: %s)", name, envVar, install)
	}
	return p
}

// FreePort returns a TCP port on 127.0.0.1 that was free a moment ago.
func FreePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("testenv: free port: %v", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// process is a server child process with its log kept in memory.
type process struct {
	name string
	cmd  *exec.Cmd
	log  *syncBuffer
	done chan struct{}
	err  error // set when done is closed
}

type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

func start(t testing.TB, name, bin string, env []string, args ...string) *process {
	t.Helper()
	cmd := exec.Command(bin, args...)
	cmd.Env = append(os.Environ(), env...)
	p := &process{name: name, cmd: cmd, log: &syncBuffer{}, done: make(chan struct{})}
	cmd.Stdout, cmd.Stderr = p.log, p.log
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	if err := cmd.Start(); err != nil {
		t.Fatalf("testenv: start %s: %v", bin, err)
	}
	go func() {
		p.err = cmd.Wait()
		close(p.done)
	}()
	return p
}

func (p *process) exited() bool {
	select {
	case <-p.done:
		return true
	default:
		return false
	}
}

// stop sends SIGTERM and, after grace, SIGKILL; it waits for the exit.
func (p *process) stop(grace time.Duration) {
	if p.exited() {
		return
	}
	_ = p.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case <-p.done:
	case <-time.After(grace):
		_ = p.cmd.Process.Kill()
		<-p.done
	}
}

// kill sends SIGKILL and waits for the exit.
func (p *process) kill() {
	if p.exited() {
		return
	}
	_ = p.cmd.Process.Kill()
	<-p.done
}

// waitReady polls ready until it reports true, the process exits, or
// readyTimeout passes; the error carries the tail of the server log.
func (p *process) waitReady(ready func() bool) error {
	deadline := time.Now().Add(readyTimeout)
	for delay := 10 * time.Millisecond; ; delay = min(2*delay, 500*time.Millisecond) {
		if ready() {
			return nil
		}
		if p.exited() {
			return fmt.Errorf("testenv: %s exited before it was ready (%w); log:\n%s", p.name, p.err, tail(p.log.String()))
		}
		if time.Now().After(deadline) {
			p.kill()
			return fmt.Errorf("testenv: %s not ready after %v; log:\n%s", p.name, readyTimeout, tail(p.log.String()))
		}
		time.Sleep(delay)
	}
}

func tail(s string) string {
	const n = 4000
	if len(s) > n {
		return "…" + s[len(s)-n:]
	}
	return s
}

func httpOK(url string) bool { return httpStatus(url) == http.StatusOK }

// httpStatus returns the status of a GET of url, or 0 when there is no
// answer within 2 s.
func httpStatus(url string) int {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		return 0
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0
	}
	resp.Body.Close()
	return resp.StatusCode
}
