package integration

import (
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"sluice/internal/testenv"
)

// TestServicesExitWhenNATSRefusesThem: the NATS server (a separate
// nats-server process) revokes the services' user by a configuration
// reload. The client gives up on a connection whose credentials are refused
// twice, so nothing the processes do can succeed any more: `sluice
// aggregate`, `sluice worker` and `sluice ingest --watch` must each exit
// with status 1 and a last line naming the cause, so that systemd or
// Kubernetes restarts them (and the restart fails loudly at connect). Before
// the services stopped on the first failed part, the aggregator and the
// watcher stayed up doing nothing.
func TestServicesExitWhenNATSRefusesThem(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	bin := binary(t, "")
	dir := t.TempDir()
	write := func(name, v string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(v), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}
	users := func(names ...string) string {
		s := "authorization {\n  users = [\n"
		for _, n := range names {
			s += fmt.Sprintf("    {user: %q, password: \"pw-%s-7c1\"}\n", n, n)
		}
		return s + "  ]\n}\n"
	}
	conf := write("nats.conf", users("sluice-svc", "operator"))
	pw := write("nats-password", "pw-sluice-svc-7c1")
	nats := testenv.StartNATS(t, "-c", conf)
	watch := filepath.Join(dir, "incoming")
	os.MkdirAll(watch, 0o755)
	common := []string{"--nats", nats.URL, "--nats-user", "sluice-svc", "--nats-password-file", pw,
		"--store", filepath.Join(dir, "store"), "--http", "off"}
	procs := []struct {
		cmd, ready string
		args       []string
	}{
		{"aggregate", "aggregator started", nil},
		{"worker", "worker started", []string{"--concurrency", "1"}},
		{"ingest", "watching for scans", []string{"--campaign", "revoked", "--watch", watch}},
	}
	started := make([]*proc, len(procs))
	for i, p := range procs {
		started[i] = start(t, p.cmd, bin, nil, append(append([]string{p.cmd}, p.args...), common...)...)
	}
	for i, p := range procs {
		waitFor(t, time.Minute, "sluice "+p.cmd+" to start", func() bool { return strings.Contains(started[i].String(), p.ready) })
	}

	// Revoke the services' user; the operator stays.
	write("nats.conf", users("operator"))
	nats.Reload()

	type exit struct {
		i   int
		err error
	}
	exits := make(chan exit, len(started))
	for i, p := range started {
		go func() { exits <- exit{i, p.cmd.Wait()} }()
	}
	// A liveness guard, not a speed check: a process that keeps running
	// never exits at all.
	guard := time.After(2 * time.Minute)
	ended := map[int]bool{}
	for len(ended) < len(started) {
		select {
		case e := <-exits:
			ended[e.i] = true
			p, name := started[e.i], procs[e.i].cmd
			var ee *exec.ExitError
			if !errors.As(e.err, &ee) || ee.ExitCode() != 1 {
				t.Errorf("sluice %s ended with %v, want exit status 1", name, e.err)
			}
			last := tail(p.String(), 1)
			// The part that notices first names itself (the connection
			// watcher, a consumer, the worker loop); each gives the cause.
			const cause = "nats connection closed for good: nats: authorization violation"
			if !strings.HasPrefix(last, "sluice: "+name+": ") || !strings.Contains(strings.ToLower(last), cause) {
				t.Errorf("sluice %s: last line %q, want \"sluice: %s: …%s\"", name, last, name, cause)
			}
		case <-guard:
			for i, p := range started {
				if !ended[i] {
					t.Errorf("sluice %s still runs two minutes after NATS revoked its user", procs[i].cmd)
					p.cmd.Process.Kill()
				}
			}
			for len(ended) < len(started) {
				ended[(<-exits).i] = true
			}
		}
	}
}
