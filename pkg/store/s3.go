package store

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"sort"
	"strings"
	"time"

	"github.com/minio/minio-go/v7"
	"github.com/minio/minio-go/v7/pkg/credentials"
)

// Environment variables read for S3 credentials when S3Config leaves them empty.
const (
	EnvAccessKey = "SLUICE_S3_ACCESS_KEY"
	EnvSecretKey = "SLUICE_S3_SECRET_KEY"
)

// Secret is a credential string that never prints: fmt verbs, %#v and slog
// all show "[redacted]" (or "" when it is empty). Use string(s) to read it.
type Secret string

const redacted = "[redacted]"

func (s Secret) show() string {
	if s == "" {
		return ""
	}
	return redacted
}

// String hides the secret.
func (s Secret) String() string { return s.show() }

// GoString hides the secret from %#v.
func (s Secret) GoString() string { return `"` + s.show() + `"` }

// LogValue hides the secret from log/slog.
func (s Secret) LogValue() slog.Value { return slog.StringValue(s.show()) }

// S3Config says where an S3 store lives and how to reach it.
type S3Config struct {
	// Endpoint is host[:port] of the S3 service ("s3.amazonaws.com" when empty).
	Endpoint string
	// Bucket is the bucket name.
	Bucket string
	// Prefix is prepended (with a slash) to every key; may be empty.
	Prefix string
	// Region is the bucket region; empty lets the client discover it.
	Region string
	// TLS selects https.
	TLS bool
	// AccessKey and SecretKey authenticate requests; when both are empty
	// they are read from SLUICE_S3_ACCESS_KEY and SLUICE_S3_SECRET_KEY, and
	// when those are empty too requests are anonymous.
	AccessKey Secret
	SecretKey Secret
	// CreateBucket makes the bucket when it does not exist.
	CreateBucket bool
	// Transport overrides the HTTP transport (custom CA and the like).
	Transport http.RoundTripper
}

// S3 is a Store in one bucket (under an optional prefix) of an S3-compatible
// object store. Values are single objects; S3 makes each PutObject atomic.
type S3 struct {
	client *minio.Client
	bucket string
	prefix string      // "" or ending with "/"
	where  string      // "s3://bucket/prefix/" for messages; holds no credentials
	host   string      // the endpoint, for messages
	creds  Credentials // only to scrub them from client errors
}

// NewS3 connects to the object store, checks that the bucket exists (making
// it when cfg.CreateBucket is set) and returns the store.
func NewS3(ctx context.Context, cfg S3Config) (*S3, error) {
	s, err := newS3Client(cfg)
	if err != nil {
		return nil, err
	}
	if err := s.checkBucket(ctx, cfg); err != nil {
		return nil, err
	}
	return s, nil
}

// newS3Client makes the store's client without asking the server anything.
func newS3Client(cfg S3Config) (*S3, error) {
	if cfg.Bucket == "" {
		return nil, errors.New("store: s3 store needs a bucket")
	}
	if cfg.Endpoint == "" {
		cfg.Endpoint = "s3.amazonaws.com"
	}
	prefix := strings.Trim(cfg.Prefix, "/")
	if prefix != "" {
		if err := checkPath(prefix); err != nil {
			return nil, fmt.Errorf("store: s3 prefix: %w", err)
		}
		prefix += "/"
	}
	if cfg.AccessKey == "" && cfg.SecretKey == "" {
		env := credentialsFromEnv()
		cfg.AccessKey, cfg.SecretKey = env.AccessKey, env.SecretKey
	}
	creds := Credentials{AccessKey: cfg.AccessKey, SecretKey: cfg.SecretKey}
	client, err := minio.New(cfg.Endpoint, &minio.Options{
		Creds:     credentials.NewStaticV4(string(cfg.AccessKey), string(cfg.SecretKey), ""),
		Secure:    cfg.TLS,
		Region:    cfg.Region,
		Transport: cfg.Transport,
	})
	if err != nil {
		return nil, fmt.Errorf("store: s3 endpoint %s: %w", cfg.Endpoint, creds.scrubErr(err))
	}
	return &S3{client: client, bucket: cfg.Bucket, prefix: prefix, where: "s3://" + cfg.Bucket + "/" + prefix, host: cfg.Endpoint, creds: creds}, nil
}

// checkBucket checks that the bucket exists, making it when
// cfg.CreateBucket is set.
func (s *S3) checkBucket(ctx context.Context, cfg S3Config) error {
	client, creds := s.client, s.creds
	ok, err := bucketExists(ctx, client, cfg.Bucket)
	if err != nil {
		return fmt.Errorf("store: s3 bucket %s at %s: %w", cfg.Bucket, s.host, creds.scrubErr(err))
	}
	if !ok {
		if !cfg.CreateBucket {
			return fmt.Errorf("store: s3 bucket %s at %s does not exist (bucket creation disabled)", cfg.Bucket, s.host)
		}
		err := client.MakeBucket(ctx, cfg.Bucket, minio.MakeBucketOptions{Region: cfg.Region})
		if err != nil {
			// Another process may have made it in between.
			if c := minio.ToErrorResponse(err).Code; c != "BucketAlreadyOwnedByYou" && c != "BucketAlreadyExists" {
				return fmt.Errorf("store: make s3 bucket %s at %s: %w", cfg.Bucket, s.host, creds.scrubErr(err))
			}
		}
	}
	return nil
}

// bucketExists asks whether the bucket exists. A server that is up but
// still initialising answers 503 (MinIO: "Server not initialized yet");
// that answer is retried with a growing pause for up to 30 s, as a process
// started together with its object store would want. Other errors
// (refused connections, wrong keys) return at once.
func bucketExists(ctx context.Context, client *minio.Client, bucket string) (bool, error) {
	deadline := time.Now().Add(30 * time.Second)
	wait := 100 * time.Millisecond
	for {
		ok, err := client.BucketExists(ctx, bucket)
		if err == nil || minio.ToErrorResponse(err).StatusCode != http.StatusServiceUnavailable || time.Now().Add(wait).After(deadline) {
			return ok, err
		}
		select {
		case <-ctx.Done():
			return false, err
		case <-time.After(wait):
		}
		wait = min(2*wait, 2*time.Second)
	}
}

func (s *S3) String() string { return s.where }

func (s *S3) object(key string) (string, error) {
	if err := CheckKey(key); err != nil {
		return "", err
	}
	return s.prefix + key, nil
}

// isMissing reports whether err says the object is missing; a missing
// bucket is not a missing key but a refusal (IsRefused).
func isMissing(err error) bool {
	r := minio.ToErrorResponse(err)
	return r.Code == "NoSuchKey" || r.Code == "NoSuchObject" || (r.StatusCode == http.StatusNotFound && r.Code != "NoSuchBucket")
}

func (s *S3) err(op, key string, err error) error {
	if isMissing(err) {
		return notFound(op, s.where, key)
	}
	return fmt.Errorf("store: %s %s%s: %w", op, s.where, key, s.creds.scrubErr(err))
}

// Get downloads the object of key.
func (s *S3) Get(ctx context.Context, key string) ([]byte, error) {
	name, err := s.object(key)
	if err != nil {
		return nil, err
	}
	obj, err := s.client.GetObject(ctx, s.bucket, name, minio.GetObjectOptions{})
	if err != nil {
		return nil, s.err("get", key, err)
	}
	defer obj.Close()
	data, err := io.ReadAll(obj)
	if err != nil {
		return nil, s.err("get", key, err)
	}
	return data, nil
}

// Stat describes the object of key.
func (s *S3) Stat(ctx context.Context, key string) (Info, error) {
	name, err := s.object(key)
	if err != nil {
		return Info{}, err
	}
	oi, err := s.client.StatObject(ctx, s.bucket, name, minio.StatObjectOptions{})
	if err != nil {
		return Info{}, s.err("stat", key, err)
	}
	return Info{Key: key, Size: oi.Size, ModTime: oi.LastModified}, nil
}

// Put uploads data as the object of key.
func (s *S3) Put(ctx context.Context, key string, data []byte) error {
	name, err := s.object(key)
	if err != nil {
		return err
	}
	_, err = s.client.PutObject(ctx, s.bucket, name, bytes.NewReader(data), int64(len(data)),
		minio.PutObjectOptions{ContentType: "application/octet-stream"})
	if err != nil {
		return s.err("put", key, err)
	}
	return nil
}

// Delete removes the object of key.
func (s *S3) Delete(ctx context.Context, key string) error {
	name, err := s.object(key)
	if err != nil {
		return err
	}
	if err := s.client.RemoveObject(ctx, s.bucket, name, minio.RemoveObjectOptions{}); err != nil && !isMissing(err) {
		return s.err("delete", key, err)
	}
	return nil
}

// List lists the objects whose key starts with prefix.
func (s *S3) List(ctx context.Context, prefix string) ([]string, error) {
	if err := checkPrefix(prefix); err != nil {
		return nil, err
	}
	var keys []string
	for oi := range s.client.ListObjects(ctx, s.bucket, minio.ListObjectsOptions{Prefix: s.prefix + prefix, Recursive: true}) {
		if oi.Err != nil {
			return nil, fmt.Errorf("store: list %s%s: %w", s.where, prefix, s.creds.scrubErr(oi.Err))
		}
		if k, ok := strings.CutPrefix(oi.Key, s.prefix); ok && !strings.HasSuffix(k, "/") {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	return keys, nil
}

// Dirs lists the common prefixes one level below prefix (delimiter "/").
func (s *S3) Dirs(ctx context.Context, prefix string) ([]string, error) {
	if err := checkDirPrefix(prefix); err != nil {
		return nil, err
	}
	var out []string
	for oi := range s.client.ListObjects(ctx, s.bucket, minio.ListObjectsOptions{Prefix: s.prefix + prefix, Recursive: false}) {
		if oi.Err != nil {
			return nil, fmt.Errorf("store: list directories %s%s: %w", s.where, prefix, s.creds.scrubErr(oi.Err))
		}
		if rest, ok := strings.CutPrefix(oi.Key, s.prefix+prefix); ok {
			if name, ok := strings.CutSuffix(rest, "/"); ok && name != "" && !strings.Contains(name, "/") {
				out = append(out, name)
			}
		}
	}
	sort.Strings(out)
	return out, nil
}
