package testenv

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"net/http"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"
)

// MinIO is a running MinIO server process.
type MinIO struct {
	// Endpoint is host:port of the S3 API on 127.0.0.1 (plain http).
	Endpoint string
	// AccessKey and SecretKey are the root credentials, random per server.
	AccessKey, SecretKey string
	// Dir is the server's data directory.
	Dir string

	t    testing.TB
	bin  string
	env  []string
	args []string
	p    *process
}

// StartMinIO starts `minio server` on a free loopback port with a temporary
// data directory and random root credentials, waits until its readiness
// endpoint answers, and stops it when t ends. The binary comes from
// $SLUICE_MINIO_BIN, PATH or GOPATH/bin (see Missing for when it is absent).
func StartMinIO(t testing.TB) *MinIO {
	t.Helper()
	bin := requireBinary(t, "minio", "SLUICE_MINIO_BIN", "go install github.com/minio/minio@v0.0.0-20260212201848-7aac2a2c5b7c")
	m := &MinIO{t: t, bin: bin, Dir: t.TempDir(), AccessKey: "sluice-" + randomHex(4), SecretKey: randomHex(16)}
	var lastErr error
	for try := 0; try < 3; try++ { // a port picked free may be taken before minio binds it
		port, console := FreePort(t), FreePort(t)
		m.Endpoint = fmt.Sprintf("127.0.0.1:%d", port)
		m.env = []string{
			"MINIO_ROOT_USER=" + m.AccessKey,
			"MINIO_ROOT_PASSWORD=" + m.SecretKey,
			"MINIO_BROWSER=off",
			"MINIO_UPDATE=off",
		}
		m.args = []string{"server", "--quiet", "--address", m.Endpoint, "--console-address", fmt.Sprintf("127.0.0.1:%d", console), m.Dir}
		lastErr = m.launch()
		if lastErr == nil {
			t.Cleanup(func() {
				m.p.stop(10 * time.Second)
				if t.Failed() {
					t.Logf("testenv: minio log:\n%s", tail(m.p.log.String()))
				}
			})
			return m
		}
		m.p.kill()
		if !strings.Contains(lastErr.Error(), "address already in use") {
			break
		}
	}
	t.Fatal(lastErr)
	return nil
}

// URL returns the s3:// store location of bucket on this server (no TLS);
// credentials go separately, as in production.
func (m *MinIO) URL(bucket string) string {
	return "s3://" + bucket + "?endpoint=" + m.Endpoint + "&tls=false"
}

func (m *MinIO) launch() error {
	m.p = start(m.t, "minio", m.bin, m.env, m.args...)
	// /minio/health/ready can answer before the object layer is up; a
	// bucket request answers 503 until it is.
	return m.p.waitReady(func() bool {
		return httpOK("http://"+m.Endpoint+"/minio/health/ready") && httpStatus("http://"+m.Endpoint+"/") != http.StatusServiceUnavailable
	})
}

// Stop stops the server (SIGTERM, then SIGKILL after 10 s).
func (m *MinIO) Stop() { m.p.stop(10 * time.Second) }

// Kill kills the server (SIGKILL), as a crash or power loss would.
func (m *MinIO) Kill() { m.p.kill() }

// Start starts a stopped server again on the same address, with the same
// data directory and credentials, and waits until it is ready; the objects
// stored before the stop are there again. It does nothing while the server
// runs.
func (m *MinIO) Start() {
	m.t.Helper()
	if !m.p.exited() {
		return
	}
	if err := m.launch(); err != nil {
		m.t.Fatal(err)
	}
}

func randomHex(n int) string {
	b := make([]byte, n)
	if _, err := rand.Read(b); err != nil {
		panic(err)
	}
	return hex.EncodeToString(b)
}

// StartMinIOOn starts a MinIO server inside test host h (a network
// namespace of a Net), on h's address, port 9000; otherwise as StartMinIO.
func StartMinIOOn(t testing.TB, h *Host) *MinIO {
	t.Helper()
	bin := requireBinary(t, "minio", "SLUICE_MINIO_BIN", "go install github.com/minio/minio@v0.0.0-20260212201848-7aac2a2c5b7c")
	m := &MinIO{t: t, bin: "ip", Dir: t.TempDir(), AccessKey: "sluice-" + randomHex(4), SecretKey: randomHex(16)}
	m.Endpoint = h.Addr + ":9000"
	m.env = []string{"MINIO_ROOT_USER=" + m.AccessKey, "MINIO_ROOT_PASSWORD=" + m.SecretKey, "MINIO_BROWSER=off", "MINIO_UPDATE=off"}
	m.args = []string{"netns", "exec", h.NS, bin, "server", "--quiet", "--address", m.Endpoint, "--console-address", h.Addr + ":9001", m.Dir}
	if err := m.launch(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		m.p.stop(10 * time.Second)
		if t.Failed() {
			t.Logf("testenv: minio log:\n%s", tail(m.p.log.String()))
		}
	})
	return m
}

// MinIOCluster is a distributed MinIO server: one node per test host
// (network namespace), one drive each, erasure coded across them (4 nodes:
// 2 data + 2 parity shards per object; reads need 2 drives, writes 3).
// Every node sees its drive at the same path, as distributed MinIO
// requires: each runs in a mount namespace of its own (unshare -m) with
// its own directory bind-mounted there.
type MinIOCluster struct {
	// Endpoint is host:port of the first node, where clients connect.
	Endpoint             string
	AccessKey, SecretKey string

	t     testing.TB
	bin   string
	hosts []*Host
	dirs  []string
	mnt   string
	procs []*process
}

// StartMinIOCluster starts the nodes on hosts, which must have consecutive
// addresses (Net.Host called one after another), and waits until the
// cluster reports write quorum.
func StartMinIOCluster(t testing.TB, hosts ...*Host) *MinIOCluster {
	t.Helper()
	bin := requireBinary(t, "minio", "SLUICE_MINIO_BIN", "go install github.com/minio/minio@v0.0.0-20260212201848-7aac2a2c5b7c")
	if _, err := exec.LookPath("unshare"); err != nil {
		Missing(t, "unshare is missing (Debian util-linux)")
	}
	c := &MinIOCluster{t: t, bin: bin, hosts: hosts, AccessKey: "sluice-" + randomHex(4), SecretKey: randomHex(16)}
	first, last := hosts[0].Addr, hosts[len(hosts)-1].Addr
	i := strings.LastIndex(first, ".")
	var a, b int
	fmt.Sscan(first[i+1:], &a)
	fmt.Sscan(last[strings.LastIndex(last, ".")+1:], &b)
	if b-a != len(hosts)-1 {
		t.Fatalf("testenv: MinIO hosts %s … %s do not have consecutive addresses", first, last)
	}
	mnt, err := os.MkdirTemp("", "minio-drive-")
	if err != nil {
		t.Fatal(err)
	}
	c.mnt = mnt
	c.Endpoint = first + ":9000"
	pool := fmt.Sprintf("http://%s.{%d...%d}:9000%s", first[:i], a, b, mnt)
	t.Cleanup(func() {
		for j, p := range c.procs {
			if p != nil {
				p.stop(10 * time.Second)
				if t.Failed() {
					t.Logf("testenv: minio node %d log:\n%s", j+1, tail(p.log.String()))
				}
			}
		}
		os.Remove(mnt)
	})
	for range hosts {
		c.dirs = append(c.dirs, t.TempDir())
		c.procs = append(c.procs, nil)
	}
	for j := range hosts {
		c.launch(j, pool)
	}
	p := c.procs[0]
	if err := p.waitReady(func() bool { return httpOK("http://" + c.Endpoint + "/minio/health/cluster") }); err != nil {
		t.Fatal(err)
	}
	return c
}

func (c *MinIOCluster) launch(j int, pool string) {
	h := c.hosts[j]
	script := fmt.Sprintf("mount --bind %s %s && exec %s server --quiet --address %s:9000 --console-address %s:9001 '%s'",
		c.dirs[j], c.mnt, c.bin, h.Addr, h.Addr, pool)
	// MINIO_CI_CD: the test's drives are directories on the machine's root
	// disk, which a distributed MinIO refuses otherwise (it is also implied
	// by CI=true, so the test ran in CI and failed on a workstation).
	env := []string{"MINIO_ROOT_USER=" + c.AccessKey, "MINIO_ROOT_PASSWORD=" + c.SecretKey, "MINIO_BROWSER=off", "MINIO_UPDATE=off", "MINIO_CI_CD=1"}
	c.procs[j] = start(c.t, fmt.Sprintf("minio node %d", j+1), "ip", env, "netns", "exec", h.NS, "unshare", "-m", "--propagation", "private", "sh", "-c", script)
}

// URL returns the s3:// store location of bucket on the first node.
func (c *MinIOCluster) URL(bucket string) string {
	return "s3://" + bucket + "?endpoint=" + c.Endpoint + "&tls=false"
}

// Stop stops node j (0-based) with SIGTERM.
func (c *MinIOCluster) Stop(j int) { c.procs[j].stop(10 * time.Second) }

// Start starts a stopped node j again with its drive; it rejoins the
// cluster and heals.
func (c *MinIOCluster) Start(j int) {
	first, last := c.hosts[0].Addr, c.hosts[len(c.hosts)-1].Addr
	i := strings.LastIndex(first, ".")
	pool := fmt.Sprintf("http://%s.{%s...%s}:9000%s", first[:i], first[i+1:], last[strings.LastIndex(last, ".")+1:], c.mnt)
	c.launch(j, pool)
}
