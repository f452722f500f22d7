package testenv

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"net/http"
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
