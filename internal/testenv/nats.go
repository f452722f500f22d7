package testenv

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// NATS is a running nats-server process with JetStream enabled.
type NATS struct {
	// URL is the client URL, nats://127.0.0.1:<port>.
	URL string
	// Dir is the JetStream store directory; it survives Restart.
	Dir string

	t       testing.TB
	bin     string
	port    int
	monitor int
	p       *process
}

// StartNATS starts `nats-server -js` on loopback with a temporary store
// directory, waits until /healthz reports JetStream ready, and stops it when
// t ends. Extra command-line arguments are appended. The binary comes from
// $SLUICE_NATS_BIN, PATH or GOPATH/bin (see Missing for when it is absent).
func StartNATS(t testing.TB, extra ...string) *NATS {
	t.Helper()
	bin := requireBinary(t, "nats-server", "SLUICE_NATS_BIN", "go install github.com/nats-io/nats-server/v2@v2.15.2")
	n := &NATS{t: t, bin: bin, Dir: t.TempDir()}
	if err := n.launch(-1, extra); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		n.p.stop(10 * time.Second)
		if t.Failed() {
			t.Logf("testenv: nats-server log:\n%s", tail(n.p.log.String()))
		}
	})
	return n
}

// launch starts the server on port (-1: any free port, read back from the
// ports file the server writes, so no port is ever guessed).
func (n *NATS) launch(port int, extra []string) error {
	portsDir, err := os.MkdirTemp(n.Dir, "ports-")
	if err != nil {
		return fmt.Errorf("testenv: %w", err)
	}
	defer os.RemoveAll(portsDir)
	args := append([]string{
		"-js", "-sd", filepath.Join(n.Dir, "js"),
		"-a", "127.0.0.1", "-p", fmt.Sprint(port), "-m", "-1",
		"--ports_file_dir", portsDir,
	}, extra...)
	n.p = start(n.t, "nats-server", n.bin, nil, args...)
	var ports struct {
		Nats       []string `json:"nats"`
		Monitoring []string `json:"monitoring"`
	}
	err = n.p.waitReady(func() bool {
		files, _ := filepath.Glob(filepath.Join(portsDir, "*.ports"))
		if len(files) == 0 {
			return false
		}
		data, err := os.ReadFile(files[0])
		if err != nil || json.Unmarshal(data, &ports) != nil || len(ports.Nats) == 0 || len(ports.Monitoring) == 0 {
			return false
		}
		return httpOK(ports.Monitoring[0] + "/healthz?js-enabled-only=true")
	})
	if err != nil {
		return err
	}
	n.URL = ports.Nats[0]
	if i := strings.LastIndex(n.URL, ":"); i >= 0 {
		fmt.Sscan(n.URL[i+1:], &n.port)
	}
	return nil
}

// Stop stops the server gracefully (SIGTERM).
func (n *NATS) Stop() { n.p.stop(10 * time.Second) }

// Reload makes the server re-read its configuration file (SIGHUP), as
// `nats-server --signal reload` does: changed users take effect at once and
// clients whose credentials are no longer valid are disconnected.
func (n *NATS) Reload() {
	n.t.Helper()
	if err := n.p.cmd.Process.Signal(syscall.SIGHUP); err != nil {
		n.t.Fatalf("testenv: reload nats-server: %v", err)
	}
}

// Kill kills the server (SIGKILL), as a crash would.
func (n *NATS) Kill() { n.p.kill() }

// Start starts a stopped (or killed) server again on the same port with the
// same store directory, and waits until JetStream is ready. It does nothing
// while the server runs.
func (n *NATS) Start(extra ...string) {
	n.t.Helper()
	if !n.p.exited() {
		return
	}
	if err := n.launch(n.port, extra); err != nil {
		n.t.Fatal(err)
	}
}

// Restart stops the server if it still runs and starts it again on the same
// port with the same store directory.
func (n *NATS) Restart(extra ...string) {
	n.t.Helper()
	n.p.stop(10 * time.Second)
	if err := n.launch(n.port, extra); err != nil {
		n.t.Fatal(err)
	}
}
