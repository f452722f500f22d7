package queue

import (
	"bytes"
	"errors"
	"fmt"
	"os"

	"github.com/nats-io/nats.go"
)

// connectOptions returns the client options for cfg, the URL to dial and
// how to name the server in messages (never with credentials).
//
// Credentials, at most one kind: CredsFile (a NATS credentials file with a
// user JWT and nkey seed, or a file holding only a user nkey seed "SU…"),
// Token, or User + Password. TLSCA verifies the server; TLSCert + TLSKey
// are the client certificate for mutual TLS. A tls:// URL requires TLS.
func connectOptions(cfg Config) ([]nats.Option, string, string, error) {
	opts := []nats.Option{nats.Name(cfg.Name), nats.MaxReconnects(-1)}
	url, where := cfg.URL, redactURL(cfg.URL)
	kinds := 0
	for _, set := range []bool{cfg.CredsFile != "", cfg.Token != "", cfg.User != "" || cfg.Password != ""} {
		if set {
			kinds++
		}
	}
	if kinds > 1 {
		return nil, "", "", errors.New("queue: give one of a credentials file, a token, or user and password")
	}
	if (cfg.User == "") != (cfg.Password == "") {
		return nil, "", "", errors.New("queue: NATS user and password go together")
	}
	if cfg.Server != nil {
		opts = append(opts, nats.InProcessServer(cfg.Server.ns))
		url, where = "", "embedded server"
		if kinds == 0 {
			switch {
			case cfg.Server.localToken != "":
				cfg.Token = cfg.Server.localToken
			case cfg.Server.localUser != "":
				cfg.User, cfg.Password = cfg.Server.localUser, cfg.Server.localPassword
			}
		}
	} else if url == "" {
		return nil, "", "", errors.New("queue: no NATS URL and no embedded server")
	}
	if cfg.CredsFile != "" {
		data, err := os.ReadFile(cfg.CredsFile)
		if err != nil {
			return nil, "", "", fmt.Errorf("queue: NATS credentials file %s: %w", cfg.CredsFile, pathErr(err))
		}
		switch {
		case bytes.Contains(data, []byte("BEGIN NATS USER JWT")):
			opts = append(opts, nats.UserCredentials(cfg.CredsFile))
		case bytes.HasPrefix(bytes.TrimSpace(data), []byte("SU")):
			o, err := nats.NkeyOptionFromSeed(cfg.CredsFile)
			if err != nil {
				return nil, "", "", fmt.Errorf("queue: NATS credentials file %s: not a valid user nkey seed", cfg.CredsFile)
			}
			opts = append(opts, o)
		default:
			return nil, "", "", fmt.Errorf("queue: NATS credentials file %s: want a .creds file (user JWT + seed) or a user nkey seed (SU…)", cfg.CredsFile)
		}
	}
	if cfg.Token != "" {
		opts = append(opts, nats.Token(cfg.Token))
	}
	if cfg.User != "" {
		opts = append(opts, nats.UserInfo(cfg.User, cfg.Password))
	}
	for _, f := range []string{cfg.TLSCA, cfg.TLSCert, cfg.TLSKey} {
		if f == "" {
			continue
		}
		if _, err := os.Stat(f); err != nil {
			return nil, "", "", fmt.Errorf("queue: NATS TLS file %s: %w", f, pathErr(err))
		}
	}
	if cfg.TLSCA != "" {
		opts = append(opts, nats.RootCAs(cfg.TLSCA))
	}
	if (cfg.TLSCert == "") != (cfg.TLSKey == "") {
		return nil, "", "", errors.New("queue: NATS client certificate and key go together")
	}
	if cfg.TLSCert != "" {
		opts = append(opts, nats.ClientCert(cfg.TLSCert, cfg.TLSKey))
	}
	return opts, url, where, nil
}

// redactURL drops user information from each URL of a NATS URL list.
// connectSecrets lists what an error of the NATS client must not show:
// the password, the token and the user info of each server URL.
func connectSecrets(cfg Config) []string {
	s := []string{cfg.Password, cfg.Token}
	for _, u := range bytes.Split([]byte(cfg.URL), []byte(",")) {
		if at := bytes.LastIndexByte(u, '@'); at >= 0 {
			from := 0
			if i := bytes.Index(u, []byte("://")); i >= 0 && i+3 <= at {
				from = i + 3
			}
			s = append(s, string(u[from:at]))
		}
	}
	return s
}

func redactURL(list string) string {
	out := []byte(nil)
	for i, u := range bytes.Split([]byte(list), []byte(",")) {
		if i > 0 {
			out = append(out, ',')
		}
		if at := bytes.LastIndexByte(u, '@'); at >= 0 {
			scheme := []byte(nil)
			if s := bytes.Index(u, []byte("://")); s >= 0 && s < at {
				scheme = u[:s+3]
			}
			u = append(append(append([]byte(nil), scheme...), "[redacted]@"...), u[at+1:]...)
		}
		out = append(out, u...)
	}
	return string(out)
}
