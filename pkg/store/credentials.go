package store

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"regexp"
	"strings"
)

// AWS-style environment variables, read when the SLUICE_ ones are unset.
const (
	EnvAWSAccessKey = "AWS_ACCESS_KEY_ID"
	EnvAWSSecretKey = "AWS_SECRET_ACCESS_KEY"
)

// credentialsFromEnv returns SLUICE_S3_ACCESS_KEY/SLUICE_S3_SECRET_KEY, or
// AWS_ACCESS_KEY_ID/AWS_SECRET_ACCESS_KEY when both of those are empty.
func credentialsFromEnv() Credentials {
	c := Credentials{AccessKey: Secret(os.Getenv(EnvAccessKey)), SecretKey: Secret(os.Getenv(EnvSecretKey))}
	if c.AccessKey == "" && c.SecretKey == "" {
		c = Credentials{AccessKey: Secret(os.Getenv(EnvAWSAccessKey)), SecretKey: Secret(os.Getenv(EnvAWSSecretKey))}
	}
	return c
}

// ParseCredentials reads an S3 credentials file: lines "key = value" (or
// "key=value"), '#' or ';' comments, with the keys access_key and
// secret_key, or aws_access_key_id and aws_secret_access_key so that the
// [default] profile of an AWS shared credentials file works too (other
// profiles are skipped). Both keys are required. Errors never repeat a
// value. name is used in error messages.
func ParseCredentials(name string, data []byte) (Credentials, error) {
	var c Credentials
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 4096), 4096)
	line, section := 0, ""
	for sc.Scan() {
		line++
		t := strings.TrimSpace(sc.Text())
		if t == "" || t[0] == '#' || t[0] == ';' {
			continue
		}
		if t[0] == '[' {
			if !strings.HasSuffix(t, "]") {
				return Credentials{}, fmt.Errorf("store: credentials file %s line %d: unclosed section header", name, line)
			}
			section = strings.TrimSpace(t[1 : len(t)-1])
			continue
		}
		if section != "" && section != "default" {
			continue
		}
		k, v, ok := strings.Cut(t, "=")
		if !ok {
			return Credentials{}, fmt.Errorf("store: credentials file %s line %d: want key = value", name, line)
		}
		k, v = strings.TrimSpace(k), strings.TrimSpace(v)
		if v == "" {
			return Credentials{}, fmt.Errorf("store: credentials file %s line %d: %s is empty", name, line, k)
		}
		switch k {
		case "access_key", "aws_access_key_id":
			c.AccessKey = Secret(v)
		case "secret_key", "aws_secret_access_key":
			c.SecretKey = Secret(v)
		case "aws_session_token", "region":
			// not used by sluice
		default:
			return Credentials{}, fmt.Errorf("store: credentials file %s line %d: unknown key %q", name, line, k)
		}
	}
	if err := sc.Err(); err != nil {
		return Credentials{}, fmt.Errorf("store: credentials file %s line %d: %w", name, line+1, err)
	}
	if c.AccessKey == "" || c.SecretKey == "" {
		return Credentials{}, fmt.Errorf("store: credentials file %s: needs both access_key and secret_key", name)
	}
	return c, nil
}

// LoadCredentials reads and parses an S3 credentials file.
func LoadCredentials(path string) (Credentials, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Credentials{}, fmt.Errorf("store: credentials file %s: %w", path, pathErr(err))
	}
	return ParseCredentials(path, data)
}

// signedQuery matches the signature parameters of a pre-signed S3 URL,
// which a client error may quote.
var signedQuery = regexp.MustCompile(`(?i)(X-Amz-(Credential|Signature|Security-Token)|AWSAccessKeyId|Signature)=[^&\s"]*`)

// scrub removes the credentials, and signature parameters of URLs, from an
// error message of the S3 client.
func (c Credentials) scrub(msg string) string {
	for _, s := range []Secret{c.SecretKey, c.AccessKey} {
		if len(s) >= 4 {
			msg = strings.ReplaceAll(msg, string(s), redacted)
		}
	}
	msg = signedQuery.ReplaceAllString(msg, "$1="+redacted)
	return strings.ReplaceAll(msg, "\n", " ")
}
