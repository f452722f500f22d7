package queue

import (
	"bufio"
	"context"
	"errors"
	"net"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nkeys"
	"golang.org/x/crypto/bcrypt"

	"sluice/internal/testenv"
	pb "sluice/proto/sluicepb"
)

// testPKI is a certificate authority made for one test (testenv.NewPKI).
type testPKI = testenv.PKI

func newTestPKI(t *testing.T) testPKI { return testenv.NewPKI(t) }

// mustRefuse opens a queue with cfg and fails the test if it connects.
func mustRefuse(t *testing.T, what string, cfg Config) error {
	t.Helper()
	cfg.Logger = quiet
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	q, err := Open(ctx, cfg)
	if err == nil {
		q.Close()
		t.Fatalf("%s: connected, want refusal", what)
	}
	if strings.Contains(err.Error(), "\n") {
		t.Errorf("%s: error spans lines: %q", what, err)
	}
	return err
}

// roundTrip checks that q really talks to JetStream: it publishes a task
// and writes and reads back a progress entry.
func roundTrip(t *testing.T, q *Queue, step string) {
	t.Helper()
	ctx := context.Background()
	if _, err := q.PublishTask(ctx, task("c", step, 0, pb.Priority_PRIORITY_LIVE)); err != nil {
		t.Fatal(err)
	}
	key := ProgressKey("c", step)
	if _, err := q.PutProgress(ctx, key, []byte(step)); err != nil {
		t.Fatal(err)
	}
	if v, _, err := q.GetProgress(ctx, key); err != nil || string(v) != step {
		t.Fatalf("progress %s = %q, %v", key, v, err)
	}
}

func TestServerRefusesExposureWithoutAuth(t *testing.T) {
	for _, addr := range []string{"0.0.0.0:-1", ":-1", "[::]:-1", "192.0.2.1:4222"} {
		_, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: addr})
		if err == nil || !strings.Contains(err.Error(), "refusing") || strings.Contains(err.Error(), "\n") {
			t.Errorf("Listen %s without auth: err = %v, want a one-line refusal", addr, err)
		}
	}
	for _, host := range []string{"127.0.0.1", "localhost", "::1", "[::1]", "127.3.4.5"} {
		if !IsLoopback(host) {
			t.Errorf("IsLoopback(%q) = false", host)
		}
	}
	for _, host := range []string{"", "0.0.0.0", "::", "10.0.0.1", "example.org"} {
		if IsLoopback(host) {
			t.Errorf("IsLoopback(%q) = true", host)
		}
	}
	// With a token the same bind is allowed.
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "0.0.0.0:-1", Token: "tok-" + t.Name()})
	if err != nil {
		t.Fatalf("Listen 0.0.0.0 with a token: %v", err)
	}
	srv.Shutdown()
}

func TestServerUsersPasswordAndNKey(t *testing.T) {
	hash, err := bcrypt.GenerateFromPassword([]byte("pw-of-bob"), bcrypt.MinCost)
	if err != nil {
		t.Fatal(err)
	}
	kp, err := nkeys.CreateUser()
	if err != nil {
		t.Fatal(err)
	}
	pub, _ := kp.PublicKey()
	seed, _ := kp.Seed()
	other, _ := nkeys.CreateUser()
	otherSeed, _ := other.Seed()
	dir := t.TempDir()
	seedFile, otherFile := filepath.Join(dir, "worker.nk"), filepath.Join(dir, "other.nk")
	os.WriteFile(seedFile, seed, 0o600)
	os.WriteFile(otherFile, otherSeed, 0o600)
	users := filepath.Join(dir, "users")
	os.WriteFile(users, []byte("# sluice NATS users\nalice pw-of-alice\nbob "+string(hash)+"\n"+pub+"\n"), 0o600)
	us, ks, err := LoadUsers(users)
	if err != nil {
		t.Fatal(err)
	}
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1", Users: us, NKeys: ks})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	url := srv.ClientURL()

	mustRefuse(t, "no credentials", Config{URL: url})
	mustRefuse(t, "wrong password", Config{URL: url, User: "alice", Password: "pw-of-bob"})
	mustRefuse(t, "unknown user", Config{URL: url, User: "mallory", Password: "pw-of-alice"})
	mustRefuse(t, "bcrypt hash as password", Config{URL: url, User: "bob", Password: string(hash)})
	mustRefuse(t, "unlisted nkey", Config{URL: url, CredsFile: otherFile})
	// The in-process user's password is random and in-process only: a
	// network client cannot use that name even with a guessed password.
	mustRefuse(t, "in-process user over TCP", Config{URL: url, User: inProcessUser, Password: "x"})

	roundTrip(t, openQueue(t, Config{URL: url, User: "alice", Password: "pw-of-alice"}), "0001")
	roundTrip(t, openQueue(t, Config{URL: url, User: "bob", Password: "pw-of-bob"}), "0002")
	roundTrip(t, openQueue(t, Config{URL: url, CredsFile: seedFile}), "0003")
	roundTrip(t, openQueue(t, Config{Server: srv}), "0004") // in-process, own credentials
}

func TestServerToken(t *testing.T) {
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1", Token: "tok-right"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	mustRefuse(t, "no token", Config{URL: srv.ClientURL()})
	err = mustRefuse(t, "wrong token", Config{URL: srv.ClientURL(), Token: "tok-wrong"})
	if strings.Contains(err.Error(), "tok-wrong") {
		t.Errorf("error repeats the token: %v", err)
	}
	roundTrip(t, openQueue(t, Config{URL: srv.ClientURL(), Token: "tok-right"}), "0001")
	if _, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Token: "a", Users: []User{{"u", "p"}}}); err == nil {
		t.Error("token and users together accepted")
	}
}

func TestServerMutualTLS(t *testing.T) {
	pki := newTestPKI(t)
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1", Token: "tok-tls",
		TLSCert: pki.ServerCert, TLSKey: pki.ServerKey, TLSClientCA: pki.CA})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	url := srv.ClientURL()
	if !strings.HasPrefix(url, "tls://127.0.0.1:") {
		t.Fatalf("ClientURL = %q, want tls://", url)
	}
	plainURL := "nats://" + strings.TrimPrefix(url, "tls://")

	// A plain-text client: the server announces tls_required and drops a
	// CONNECT sent in the clear.
	c, err := net.DialTimeout("tcp", strings.TrimPrefix(url, "tls://"), 5*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	c.SetDeadline(time.Now().Add(10 * time.Second))
	r := bufio.NewReader(c)
	info, err := r.ReadString('\n')
	if err != nil || !strings.Contains(info, `"tls_required":true`) {
		t.Fatalf("INFO = %q, %v; want tls_required", info, err)
	}
	c.Write([]byte("CONNECT {\"auth_token\":\"tok-tls\",\"verbose\":false}\r\nPING\r\n"))
	reply, _ := r.ReadString('\n')
	c.Close()
	if strings.HasPrefix(reply, "PONG") {
		t.Fatalf("plain-text client got %q", reply)
	}
	t.Logf("plain-text client got %q", strings.TrimSpace(reply))

	mustRefuse(t, "TLS without the test CA", Config{URL: url, Token: "tok-tls"})
	mustRefuse(t, "TLS without a client certificate", Config{URL: url, Token: "tok-tls", TLSCA: pki.CA})
	mustRefuse(t, "right certificates, no token", Config{URL: url, TLSCA: pki.CA, TLSCert: pki.ClientCert, TLSKey: pki.ClientKey})
	roundTrip(t, openQueue(t, Config{URL: url, Token: "tok-tls", TLSCA: pki.CA, TLSCert: pki.ClientCert, TLSKey: pki.ClientKey}), "0001")
	// nats:// URL to the same server: the client upgrades to TLS as told.
	roundTrip(t, openQueue(t, Config{URL: plainURL, Token: "tok-tls", TLSCA: pki.CA, TLSCert: pki.ClientCert, TLSKey: pki.ClientKey}), "0002")
	// In-process clients need no TLS.
	roundTrip(t, openQueue(t, Config{Server: srv}), "0003")
}

func TestParseUsers(t *testing.T) {
	kp, _ := nkeys.CreateUser()
	pub, _ := kp.PublicKey()
	us, ks, err := ParseUsers("u", []byte("\n# c\n  alice   s3cr3t \n"+pub+"\n"))
	if err != nil || len(us) != 1 || us[0] != (User{"alice", "s3cr3t"}) || len(ks) != 1 || ks[0] != pub {
		t.Fatalf("ParseUsers = %v %v %v", us, ks, err)
	}
	for _, bad := range []string{"", "# only\n", "alice pw extra-secret", "alice a\nalice b", "UNOTAKEY", inProcessUser + " x", pub + "\n" + pub} {
		_, _, err := ParseUsers("users.txt", []byte(bad))
		if err == nil {
			t.Errorf("ParseUsers(%q) accepted", bad)
			continue
		}
		if !strings.HasPrefix(err.Error(), "queue: users file users.txt") || strings.Contains(err.Error(), "extra-secret") {
			t.Errorf("ParseUsers(%q) error %q: want prefix and no password", bad, err)
		}
	}
	if s := (User{"a", "topsecret"}).String(); strings.Contains(s, "topsecret") {
		t.Errorf("User prints its password: %s", s)
	}
}

func FuzzParseUsers(f *testing.F) {
	kp, _ := nkeys.CreateUser()
	pub, _ := kp.PublicKey()
	f.Add([]byte("alice pw\n" + pub + "\n# x\n"))
	f.Add([]byte("a b c"))
	f.Add([]byte{0, '\n', 0xff})
	f.Fuzz(func(t *testing.T, data []byte) {
		us, ks, err := ParseUsers("f", data)
		if err != nil {
			if strings.Contains(err.Error(), "\n") {
				t.Fatalf("multi-line error %q", err)
			}
			return
		}
		if len(us)+len(ks) == 0 {
			t.Fatal("no users and no error")
		}
		for _, u := range us {
			if u.Name == "" || u.Password == "" || strings.ContainsAny(u.Name+u.Password, " \t\n") {
				t.Fatalf("bad user %q", u.Name)
			}
		}
		for _, k := range ks {
			if !nkeys.IsValidPublicUserKey(k) {
				t.Fatalf("bad nkey %q", k)
			}
		}
	})
}

func TestRedactURL(t *testing.T) {
	for in, want := range map[string]string{
		"nats://u:p@h:4222":         "nats://[redacted]@h:4222",
		"nats://h:1,tls://tok@h2:2": "nats://h:1,tls://[redacted]@h2:2",
		"nats://127.0.0.1:4222":     "nats://127.0.0.1:4222",
		"a:b@c":                     "[redacted]@c",
	} {
		if got := redactURL(in); got != want {
			t.Errorf("redactURL(%q) = %q, want %q", in, got, want)
		}
	}
}

// A refused connection is reported without the credentials it used, yet
// the NATS client's error stays in the chain: errors.Is finds
// nats.ErrAuthorization (wrong password in the URL) and nats.ErrNoServers
// (nothing listening), so a caller can tell a refusal from an outage.
func TestConnectErrorScrubbedButUnwraps(t *testing.T) {
	srv, err := StartServer(ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1", Users: []User{{"alice", "pw-of-alice"}}})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	hostPort := strings.TrimPrefix(srv.ClientURL(), "nats://")
	const inURL, inCfg = "wrong-pw-in-url-8731", "wrong-pw-in-config-5520"

	err = mustRefuse(t, "wrong password in the URL", Config{URL: "nats://alice:" + inURL + "@" + hostPort})
	if !errors.Is(err, nats.ErrAuthorization) || strings.Contains(err.Error(), inURL) {
		t.Errorf("wrong password in the URL: %v; want nats.ErrAuthorization in the chain and no password", err)
	}
	err = mustRefuse(t, "wrong password in the config", Config{URL: srv.ClientURL(), User: "alice", Password: inCfg})
	if !errors.Is(err, nats.ErrAuthorization) || strings.Contains(err.Error(), inCfg) {
		t.Errorf("wrong password in the config: %v; want nats.ErrAuthorization in the chain and no password", err)
	}

	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	closed := ln.Addr().String()
	ln.Close()
	err = mustRefuse(t, "nothing listening", Config{URL: "nats://alice:" + inURL + "@" + closed})
	if !errors.Is(err, nats.ErrNoServers) || strings.Contains(err.Error(), inURL) {
		t.Errorf("nothing listening: %v; want nats.ErrNoServers in the chain and no password", err)
	}
	t.Logf("refusal: %v", err)
}
