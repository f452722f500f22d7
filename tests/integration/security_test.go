package integration

// Security on real components (issue 8, part C): a separate nats-server
// process that requires users and mutual TLS serves sluice worker,
// aggregate and ingest processes against a real MinIO; clients without the
// client certificate, without the CA or with a wrong password are refused;
// the HTTP token guards /metrics of a running aggregator; and in every
// process output, failing runs included (wrong S3 secret, MinIO stopped),
// neither the S3 secret and access key nor the NATS password appear.

import (
	"encoding/json"
	"fmt"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"context"

	"sluice/internal/testenv"
	"sluice/pkg/layout"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	pb "sluice/proto/sluicepb"
)

// certFiles is a CA made for one test (testenv.NewPKI).
type certFiles = testenv.PKI

func makeCerts(t *testing.T) certFiles { return testenv.NewPKI(t) }

func TestSecuredDistributed(t *testing.T) {
	if testing.Short() {
		t.Skip("multi-process test")
	}
	bin := buildSluice(t)
	dir := t.TempDir()
	paths, cfg := scans(t, dir)
	cfgPath := filepath.Join(dir, "campaign.json")
	b, _ := json.Marshal(cfg)
	os.WriteFile(cfgPath, b, 0o644)
	secrets := filepath.Join(dir, "secrets")
	os.MkdirAll(secrets, 0o700)
	write := func(name, v string) string {
		p := filepath.Join(secrets, name)
		if err := os.WriteFile(p, []byte(v), 0o600); err != nil {
			t.Fatal(err)
		}
		return p
	}

	// NATS: users + mutual TLS, from a configuration file.
	certs := makeCerts(t)
	const natsPassword = "nats-pw-Vq83-distinctive"
	conf := write("nats.conf", fmt.Sprintf(`authorization {
  users = [
    {user: "sluice-svc", password: %q}
    {user: "operator", password: "other-%s"}
  ]
}
tls {
  cert_file: %q
  key_file: %q
  ca_file: %q
  verify: true
  timeout: 2
}
`, natsPassword, natsPassword, certs.ServerCert, certs.ServerKey, certs.CA))
	nats := testenv.StartNATS(t, "-c", conf)
	if !strings.HasPrefix(nats.URL, "tls://") {
		t.Fatalf("nats-server URL %q: want tls://", nats.URL)
	}

	// MinIO with its (random, per-server) root credentials in a file.
	minio := testenv.StartMinIO(t)
	creds := write("s3", "access_key = "+minio.AccessKey+"\nsecret_key = "+minio.SecretKey+"\n")
	wrongCreds := write("s3-wrong", "access_key = "+minio.AccessKey+"\nsecret_key = wrong-"+minio.SecretKey+"\n")
	pwFile := write("nats-pw", natsPassword+"\n")
	httpTok := "http-tok-Kd92-distinctive"
	tokFile := write("http-token", httpTok)

	loc := minio.URL("sluice-sec")
	natsFlags := []string{"--nats", nats.URL, "--nats-user", "sluice-svc", "--nats-password-file", pwFile,
		"--nats-tls-ca", certs.CA, "--nats-tls-cert", certs.ClientCert, "--nats-tls-key", certs.ClientKey}
	conn := append([]string{"--store", loc, "--s3-credentials-file", creds}, natsFlags...)
	common := append(append([]string{}, conn...), "--ack-wait", "10s")
	// No secret in the environment: everything comes from files.
	env := []string{"SLUICE_S3_ACCESS_KEY=", "SLUICE_S3_SECRET_KEY=", "AWS_ACCESS_KEY_ID=", "AWS_SECRET_ACCESS_KEY=",
		"SLUICE_NATS_PASSWORD=", "SLUICE_NATS_TOKEN=", "SLUICE_HTTP_TOKEN="}

	var outputs []string
	once := func(name string, args ...string) (int, string) {
		cmd := exec.Command(bin, args...)
		cmd.Env = append(os.Environ(), env...)
		out, _ := cmd.CombinedOutput()
		outputs = append(outputs, name+":\n"+string(out))
		return cmd.ProcessState.ExitCode(), string(out)
	}

	// Refused NATS clients: each exits with one line naming the problem.
	for _, tc := range []struct {
		name string
		args []string
	}{
		{"no client certificate", []string{"--nats", nats.URL, "--nats-user", "sluice-svc", "--nats-password-file", pwFile, "--nats-tls-ca", certs.CA}},
		{"no CA (server not trusted)", []string{"--nats", nats.URL, "--nats-user", "sluice-svc", "--nats-password-file", pwFile, "--nats-tls-cert", certs.ClientCert, "--nats-tls-key", certs.ClientKey}},
		{"wrong password", []string{"--nats", nats.URL, "--nats-user", "sluice-svc", "--nats-password-file", write("bad-pw", "nope"),
			"--nats-tls-ca", certs.CA, "--nats-tls-cert", certs.ClientCert, "--nats-tls-key", certs.ClientKey}},
		{"no credentials", []string{"--nats", nats.URL, "--nats-tls-ca", certs.CA, "--nats-tls-cert", certs.ClientCert, "--nats-tls-key", certs.ClientKey}},
	} {
		code, out := once("worker "+tc.name, append([]string{"worker", "--http", "off", "--store", loc, "--s3-credentials-file", creds}, tc.args...)...)
		if code == 0 || !strings.Contains(out, "connect to tls://127.0.0.1:") {
			t.Errorf("worker with %s: exit %d, output %q; want a refused connection", tc.name, code, out)
		}
		t.Logf("worker with %s: %s", tc.name, strings.TrimSpace(out))
	}
	// A plain-text client (no TLS at all) is refused too.
	plain := "nats://" + strings.TrimPrefix(nats.URL, "tls://")
	if c, err := net.DialTimeout("tcp", strings.TrimPrefix(nats.URL, "tls://"), 5*time.Second); err == nil {
		c.SetDeadline(time.Now().Add(10 * time.Second))
		buf := make([]byte, 4096)
		n, _ := c.Read(buf)
		fmt.Fprintf(c, "CONNECT {\"user\":\"sluice-svc\",\"pass\":%q}\r\nPING\r\n", natsPassword)
		m, _ := c.Read(buf[n:])
		c.Close()
		if !strings.Contains(string(buf[:n]), `"tls_required":true`) || strings.Contains(string(buf[n:n+m]), "PONG") {
			t.Errorf("plain-text client: INFO %q, reply %q", buf[:n], buf[n:n+m])
		}
	}
	_ = plain

	// The secured pipeline: aggregator (HTTP with a token), worker, ingest.
	aggAddr := fmt.Sprintf("127.0.0.1:%d", testenv.FreePort(t))
	agg := start(t, "aggregate", bin, env, append([]string{"aggregate", "--http", aggAddr, "--http-token-file", tokFile}, common...)...)
	wrk := start(t, "worker", bin, env, append([]string{"worker", "--http", "off", "--concurrency", "2", "--id", "secure-w"}, common...)...)
	code, out := once("ingest", append([]string{"ingest", "--campaign", "sec", "--config", cfgPath, paths[0]}, conn...)...)
	if code != 0 {
		t.Fatalf("ingest over TLS + users: exit %d\n%s", code, out)
	}
	st, err := store.Open(context.Background(), loc, store.Credentials{AccessKey: store.Secret(minio.AccessKey), SecretKey: store.Secret(minio.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	rows := waitRows(t, st, "sec", 1, 3*time.Minute, agg, wrk)
	if len(rows) != 1 || rows[0].Porosity == nil || *rows[0].Porosity <= 0 {
		t.Fatalf("series after one step over the secured queue: %+v", rows)
	}

	// /metrics of the aggregator wants the bearer token; probes do not.
	for _, tc := range []struct {
		path, auth string
		want       int
	}{{"/metrics", "", 401}, {"/metrics", "Bearer " + httpTok, 200}, {"/api/campaigns", "Bearer wrong", 401}, {"/healthz", "", 200}} {
		req, _ := http.NewRequest("GET", "http://"+aggAddr+tc.path, nil)
		if tc.auth != "" {
			req.Header.Set("Authorization", tc.auth)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != tc.want {
			t.Errorf("GET %s (%q): %d, want %d", tc.path, tc.auth, resp.StatusCode, tc.want)
		}
	}

	// Failing runs: a wrong S3 secret, then MinIO stopped.
	code, out = once("ingest wrong secret", append([]string{"ingest", "--campaign", "sec", "--config", cfgPath, paths[1],
		"--store", loc, "--s3-credentials-file", wrongCreds}, natsFlags...)...)
	if code == 0 || !strings.Contains(out, "s3 bucket sluice-sec") {
		t.Errorf("ingest with a wrong secret: exit %d, %q", code, out)
	}
	t.Logf("ingest with a wrong secret: %s", strings.TrimSpace(out))
	code, out = once("worker wrong secret", append([]string{"worker", "--http", "off", "--store", loc, "--s3-credentials-file", wrongCreds}, natsFlags...)...)
	if code == 0 || !strings.Contains(out, "s3 bucket sluice-sec") {
		t.Errorf("worker with a wrong secret: exit %d, %q", code, out)
	}
	minio.Stop()
	code, out = once("ingest MinIO stopped", append([]string{"ingest", "--campaign", "sec", "--config", cfgPath, paths[2]}, conn...)...)
	if code == 0 {
		t.Errorf("ingest with MinIO stopped: exit 0\n%s", out)
	}
	t.Logf("ingest with MinIO stopped: %s", strings.TrimSpace(out))
	// The running worker meets the stopped store: a task queued now fails
	// on every delivery and is logged; so is its dead letter.
	q, err := queue.Open(context.Background(), queue.Config{URL: nats.URL, User: "operator", Password: "other-" + natsPassword,
		TLSCA: certs.CA, TLSCert: certs.ClientCert, TLSKey: certs.ClientKey})
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	// The task carries the keys the layout gives its step, or the worker
	// refuses it before touching the store (a forged-task check) and the
	// store failure this part is about never happens.
	step, err := layout.NewStep("sec", "scan-0099")
	if err != nil {
		t.Fatal(err)
	}
	resultKey, err := step.TileResult(0, "5ec")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := q.PublishTask(context.Background(), &pb.TileTask{Campaign: "sec", Step: "scan-0099", Tile: 0, TileCount: 1,
		ParamHash: "5ec", Priority: pb.Priority_PRIORITY_LIVE, Core: &pb.Box{MaxZ: 8, MaxY: 8, MaxX: 8},
		InputKey: step.Volume(), ResultKey: resultKey, LabelKey: step.Labels()}); err != nil {
		t.Fatal(err)
	}
	// The search below proves nothing about the running worker until it
	// has logged the failure that could carry a secret: wait for the store
	// errors of that task (each attempt, then the tile given up after the
	// store's retry budget) to be in its log.
	waitFor(t, 3*time.Minute, "the worker to log the store failures of the task it cannot run with MinIO stopped", func() bool {
		return logged(wrk, "scan-0099", "store operation failed") && logged(wrk, "scan-0099", "tile failed")
	})
	outputs = append(outputs, "aggregate:\n"+agg.String(), "worker:\n"+wrk.String())

	for _, s := range []struct{ what, v string }{
		{"S3 secret key", minio.SecretKey}, {"S3 access key", minio.AccessKey},
		{"NATS password", natsPassword}, {"HTTP token", httpTok},
	} {
		for _, o := range outputs {
			if strings.Contains(o, s.v) {
				name, _, _ := strings.Cut(o, ":\n")
				t.Errorf("%s appears in the output of %s", s.what, name)
			}
		}
	}
	total := 0
	for _, o := range outputs {
		total += len(o)
	}
	t.Logf("searched %d outputs (%d bytes) for 4 secrets", len(outputs), total)
	for _, l := range strings.Split(wrk.String(), "\n") {
		if strings.Contains(l, "scan-0099") && strings.Contains(l, "tile failed") {
			t.Logf("worker: %s", l)
			break
		}
	}
}
