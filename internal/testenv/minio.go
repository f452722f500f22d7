package testenv

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
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

	p *process
}

// StartMinIO starts `minio server` on a free loopback port with a temporary
// data directory and random root credentials, waits until its readiness
// endpoint answers, and stops it when t ends. The binary comes from
// $SLUICE_MINIO_BIN, PATH or GOPATH/bin (see Missing for when it is absent).
func StartMinIO(t testing.TB) *MinIO {
	t.Helper()
	bin := requireBinary(t, "minio", "SLUICE_MINIO_BIN", "go install github.com/minio/minio@v0.0.0-20260212201848-7aac2a2c5b7c")
	m := &MinIO{Dir: t.TempDir(), AccessKey: "sluice-" + randomHex(4), SecretKey: randomHex(16)}
	var lastErr error
	for try := 0; try < 3; try++ { // a port picked free may be taken before minio binds it
		port, console := FreePort(t), FreePort(t)
		m.Endpoint = fmt.Sprintf("127.0.0.1:%d", port)
		m.p = start(t, "minio", bin, []string{
			"MINIO_ROOT_USER=" + m.AccessKey,
			"MINIO_ROOT_PASSWORD=" + m.SecretKey,
			"MINIO_BROWSER=off",
			"MINIO_UPDATE=off",
		}, "server", "--quiet", "--address", m.Endpoint, "--console-address", fmt.Sprintf("127.0.0.1:%d", console), m.Dir)
		lastErr = m.p.waitReady(func() bool { return httpOK("http://" + m.Endpoint + "/minio/health/ready") })
		if lastErr == nil {
			p := m.p
			t.Cleanup(func() {
				p.stop(10 * time.Second)
				if t.Failed() {
					t.Logf("testenv: minio log:\n%s", tail(p.log.String()))
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

// Stop stops the server (SIGTERM, then SIGKILL after 10 s).
func (m *MinIO) Stop() { m.p.stop(10 * time.Second) }

func randomHex(n int) string {
	b := make([]byte, n)
	if _, err := rand.Read(b); err != nil {
		panic(err)
	}
	return hex.EncodeToString(b)
}
