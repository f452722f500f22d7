package store

import (
	"context"
	"fmt"
	"net/url"
	"strconv"
	"strings"
)

// Credentials authenticate against an S3 store. Open falls back to
// SLUICE_S3_ACCESS_KEY and SLUICE_S3_SECRET_KEY when both are empty, then to
// AWS_ACCESS_KEY_ID and AWS_SECRET_ACCESS_KEY. Both fields are Secrets:
// they never print. Store errors are scrubbed of them.
type Credentials struct {
	AccessKey, SecretKey Secret
}

// Open opens the store a location names:
//
//	/data/sluice, ./data, file:///data/sluice        a Local store on that directory
//	s3://bucket[/prefix][?endpoint=host:port&tls=false&region=r&create=false]
//
// For s3, endpoint defaults to s3.amazonaws.com, tls to true, create (make
// the bucket when missing) to true. Credentials never go in the location:
// one with a user part is rejected so that it cannot end up in logs.
func Open(ctx context.Context, location string, creds Credentials) (Store, error) {
	if location == "" {
		return nil, fmt.Errorf("store: empty store location")
	}
	if !strings.Contains(location, "://") {
		return NewLocal(location)
	}
	u, err := url.Parse(location)
	if err != nil {
		// url.Error repeats the location; it has no user part here because
		// one would have parsed, so it is safe to show the scheme only.
		return nil, fmt.Errorf("store: cannot parse store location (scheme %q)", strings.SplitN(location, "://", 2)[0])
	}
	if u.User != nil {
		return nil, fmt.Errorf("store: store location %s://%s... holds credentials; pass them with flags or %s/%s", u.Scheme, u.Host, EnvAccessKey, EnvSecretKey)
	}
	switch u.Scheme {
	case "file":
		if u.Host != "" && u.Host != "localhost" {
			return nil, fmt.Errorf("store: file location %s: want file:///absolute/path", location)
		}
		if u.Path == "" {
			return nil, fmt.Errorf("store: file location %s has no path", location)
		}
		return NewLocal(u.Path)
	case "s3":
		cfg, err := ParseS3(u)
		if err != nil {
			return nil, err
		}
		cfg.AccessKey, cfg.SecretKey = creds.AccessKey, creds.SecretKey
		return NewS3(ctx, cfg)
	}
	return nil, fmt.Errorf("store: store location %s: unknown scheme %q (want a path, file:// or s3://)", location, u.Scheme)
}

// ParseS3 reads an S3Config (without credentials) from an s3:// URL.
func ParseS3(u *url.URL) (S3Config, error) {
	cfg := S3Config{Bucket: u.Host, Prefix: strings.Trim(u.Path, "/"), TLS: true, CreateBucket: true}
	if cfg.Bucket == "" {
		return cfg, fmt.Errorf("store: s3 location %s has no bucket", u.Redacted())
	}
	for k, vs := range u.Query() {
		v := vs[len(vs)-1]
		switch k {
		case "endpoint":
			cfg.Endpoint = v
		case "region":
			cfg.Region = v
		case "tls", "create":
			b, err := strconv.ParseBool(v)
			if err != nil {
				return cfg, fmt.Errorf("store: s3 location %s: %s=%q is not a boolean", u.Redacted(), k, v)
			}
			if k == "tls" {
				cfg.TLS = b
			} else {
				cfg.CreateBucket = b
			}
		default:
			return cfg, fmt.Errorf("store: s3 location %s: unknown parameter %q", u.Redacted(), k)
		}
	}
	if cfg.Prefix != "" {
		if err := checkPath(cfg.Prefix); err != nil {
			return cfg, fmt.Errorf("store: s3 location %s: prefix: %w", u.Redacted(), err)
		}
	}
	return cfg, nil
}
