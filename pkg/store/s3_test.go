package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"strings"
	"testing"

	"sluice/internal/testenv"
)

// These tests run against a real MinIO server started by testenv.

func TestS3Conformance(t *testing.T) {
	m := testenv.StartMinIO(t)
	ctx := context.Background()
	s, err := Open(ctx, m.URL("sluice-test")+"&region=us-east-1", Credentials{Secret(m.AccessKey), Secret(m.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := s.(*S3); !ok {
		t.Fatalf("Open(s3://…) = %T, want *S3", s)
	}
	conformance(t, s)

	// A second store under a prefix of the same bucket sees only its keys.
	p, err := Open(ctx, "s3://sluice-test/run-7?endpoint="+m.Endpoint+"&tls=false", Credentials{Secret(m.AccessKey), Secret(m.SecretKey)})
	if err != nil {
		t.Fatal(err)
	}
	if err := p.Put(ctx, "campaigns/c/campaign.json", []byte("{}")); err != nil {
		t.Fatal(err)
	}
	got, err := p.List(ctx, "")
	if err != nil || len(got) != 1 || got[0] != "campaigns/c/campaign.json" {
		t.Fatalf("prefixed List = %q, %v", got, err)
	}
	if dirs, err := p.Dirs(ctx, "campaigns/"); err != nil || len(dirs) != 1 || dirs[0] != "c" {
		t.Fatalf("prefixed Dirs = %q, %v", dirs, err)
	}
	raw, err := s.Get(ctx, "run-7/campaigns/c/campaign.json")
	if err != nil || string(raw) != "{}" {
		t.Fatalf("unprefixed view of a prefixed key: %q, %v", raw, err)
	}
}

func TestS3CredentialsFromEnv(t *testing.T) {
	m := testenv.StartMinIO(t)
	t.Setenv(EnvAccessKey, m.AccessKey)
	t.Setenv(EnvSecretKey, m.SecretKey)
	ctx := context.Background()
	s, err := Open(ctx, m.URL("from-env"), Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Put(ctx, "k", []byte("v")); err != nil {
		t.Fatal(err)
	}
	if got, err := s.Get(ctx, "k"); err != nil || string(got) != "v" {
		t.Fatalf("Get = %q, %v", got, err)
	}
}

func TestS3BucketCreationAndSecrets(t *testing.T) {
	m := testenv.StartMinIO(t)
	ctx := context.Background()
	creds := Credentials{Secret(m.AccessKey), Secret(m.SecretKey)}

	// create=false on a missing bucket is an error that names the bucket.
	_, err := Open(ctx, m.URL("absent")+"&create=false", creds)
	if err == nil || !strings.Contains(err.Error(), "absent") {
		t.Fatalf("create=false on a missing bucket: %v", err)
	}
	// Once made, create=false opens it.
	if _, err := Open(ctx, m.URL("absent"), creds); err != nil {
		t.Fatal(err)
	}
	if _, err := Open(ctx, m.URL("absent")+"&create=false", creds); err != nil {
		t.Fatalf("create=false on an existing bucket: %v", err)
	}

	// A wrong secret fails, and the error shows neither key.
	wrong := Credentials{Secret(m.AccessKey), Secret("wrong-" + m.SecretKey)}
	_, err = Open(ctx, m.URL("absent"), wrong)
	if err == nil {
		t.Fatal("wrong secret key accepted")
	}
	if strings.Contains(err.Error(), m.SecretKey) {
		t.Fatalf("error shows the secret key: %v", err)
	}
	t.Logf("wrong secret gives: %v", err)

	// Anonymous access to the private bucket is refused, reported as an
	// error rather than as a missing key.
	anon, err := NewS3(ctx, S3Config{Endpoint: m.Endpoint, Bucket: "absent", AccessKey: "", SecretKey: ""})
	if err == nil {
		_, err = anon.Get(ctx, "x")
		if err == nil || errors.Is(err, fs.ErrNotExist) {
			t.Fatalf("anonymous Get: %v, want access denied", err)
		}
	}
}

func TestSecretNeverPrints(t *testing.T) {
	const secret = "s3cr3t-value-123"
	cfg := S3Config{Endpoint: "h:1", Bucket: "b", AccessKey: "AKIA-access-456", SecretKey: secret}
	var buf bytes.Buffer
	slog.New(slog.NewTextHandler(&buf, nil)).Info("config", "cfg", cfg, "secret", cfg.SecretKey)
	slog.New(slog.NewJSONHandler(&buf, nil)).Info("config", "secret", cfg.SecretKey, "access", cfg.AccessKey)
	for _, out := range []string{
		fmt.Sprintf("%v", cfg), fmt.Sprintf("%+v", cfg), fmt.Sprintf("%#v", cfg), fmt.Sprint(cfg.SecretKey),
		fmt.Sprintf("%s %q", cfg.SecretKey, cfg.AccessKey), buf.String(),
	} {
		if strings.Contains(out, secret) || strings.Contains(out, "AKIA-access-456") {
			t.Errorf("credential printed: %s", out)
		}
		if !strings.Contains(out, "redacted") {
			t.Errorf("no redaction marker in %s", out)
		}
	}
	if string(cfg.SecretKey) != secret {
		t.Error("string conversion lost the secret")
	}
}
