package store

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"sluice/internal/testenv"
)

func TestParseCredentials(t *testing.T) {
	for _, tc := range []struct{ name, data string }{
		{"own format", "# sluice\naccess_key = AKID-1\nsecret_key=SEC/ret+1\n"},
		{"AWS shared file", "[other]\naws_access_key_id = NOPE\naws_secret_access_key = NOPE\n[default]\naws_access_key_id=AKID-1\naws_secret_access_key = SEC/ret+1\nregion = x\n"},
	} {
		c, err := ParseCredentials("f", []byte(tc.data))
		if err != nil || string(c.AccessKey) != "AKID-1" || string(c.SecretKey) != "SEC/ret+1" {
			t.Errorf("%s: %q %q %v", tc.name, string(c.AccessKey), string(c.SecretKey), err)
		}
	}
	for _, bad := range []string{"", "access_key = a\n", "access_key = a\nsecret_key = \n", "secret_key TOPSECRET\n",
		"access_key = a\nsecret_key = TOPSECRET\ncolour = blue\n", "[default\n"} {
		_, err := ParseCredentials("creds.txt", []byte(bad))
		if err == nil {
			t.Errorf("ParseCredentials(%q) accepted", bad)
			continue
		}
		if !strings.HasPrefix(err.Error(), "store: credentials file creds.txt") || strings.Contains(err.Error(), "TOPSECRET") {
			t.Errorf("ParseCredentials(%q): %v", bad, err)
		}
	}
	c := Credentials{AccessKey: "AKIDEXAMPLE", SecretKey: "wJalrXUtnFEMI"}
	for _, s := range []string{fmt.Sprint(c), fmt.Sprintf("%v %+v %#v %s", c, c, c, c.SecretKey)} {
		if strings.Contains(s, "wJalr") || strings.Contains(s, "AKIDEX") {
			t.Errorf("credentials print: %s", s)
		}
	}
	msg := c.scrub("GET http://h/b/k?X-Amz-Credential=AKIDEXAMPLE%2F2026&X-Amz-Signature=abc123 key AKIDEXAMPLE secret wJalrXUtnFEMI\nmore")
	if strings.Contains(msg, "AKIDEX") || strings.Contains(msg, "wJalr") || strings.Contains(msg, "abc123") || strings.Contains(msg, "\n") {
		t.Errorf("scrub left a secret: %s", msg)
	}
}

func FuzzParseCredentials(f *testing.F) {
	f.Add([]byte("access_key = a\nsecret_key = b\n"))
	f.Add([]byte("[default]\naws_access_key_id=a\naws_secret_access_key=b"))
	f.Add([]byte("[x\n=\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := ParseCredentials("f", data)
		if err != nil {
			if strings.Contains(err.Error(), "\n") {
				t.Fatalf("multi-line error %q", err)
			}
			return
		}
		if c.AccessKey == "" || c.SecretKey == "" {
			t.Fatal("accepted without both keys")
		}
	})
}

// TestS3ErrorsHideCredentials: a wrong secret, an unknown access key and a
// stopped server give errors that name the bucket but never the keys.
func TestS3ErrorsHideCredentials(t *testing.T) {
	m := testenv.StartMinIO(t)
	ctx := context.Background()
	secret := "Zq7-distinctive-s3-secret-" + m.SecretKey[:8]
	path := filepath.Join(t.TempDir(), "creds")
	os.WriteFile(path, []byte("access_key = "+m.AccessKey+"\nsecret_key = "+m.SecretKey+"\n"), 0o600)
	good, err := LoadCredentials(path)
	if err != nil {
		t.Fatal(err)
	}
	s, err := Open(ctx, m.URL("sluice-creds"), good)
	if err != nil {
		t.Fatalf("credentials file: %v", err)
	}
	if err := s.Put(ctx, "campaigns/c/x", []byte("1")); err != nil {
		t.Fatal(err)
	}
	check := func(what string, err error, keys ...string) {
		t.Helper()
		if err == nil {
			t.Fatalf("%s: no error", what)
		}
		for _, k := range keys {
			if strings.Contains(err.Error(), k) {
				t.Errorf("%s: error shows a credential: %v", what, err)
			}
		}
		if !strings.HasPrefix(err.Error(), "store: ") || strings.Contains(err.Error(), "\n") {
			t.Errorf("%s: want one line starting with 'store: ', got %q", what, err)
		}
		t.Logf("%s: %v", what, err)
	}
	_, err = Open(ctx, m.URL("sluice-creds"), Credentials{Secret(m.AccessKey), Secret(secret)})
	check("wrong secret", err, secret, m.AccessKey)
	_, err = Open(ctx, m.URL("sluice-creds"), Credentials{Secret("unknown-" + secret), Secret(secret)})
	check("unknown access key", err, secret)
	t.Setenv(EnvAccessKey, "")
	t.Setenv(EnvSecretKey, "")
	t.Setenv(EnvAWSAccessKey, m.AccessKey)
	t.Setenv(EnvAWSSecretKey, m.SecretKey)
	if _, err := Open(ctx, m.URL("sluice-creds"), Credentials{}); err != nil {
		t.Fatalf("AWS_ environment: %v", err)
	}
	m.Stop()
	_, err = s.Get(ctx, "campaigns/c/x")
	check("stopped server", err, m.SecretKey, m.AccessKey)
}
