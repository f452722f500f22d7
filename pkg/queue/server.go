package queue

import (
	"bufio"
	"bytes"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"net"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nkeys"
)

// User is a client the embedded server lets in with a user name and a
// password. Password may be a bcrypt hash ("$2a$…", "$2b$…"); the server
// then compares the client's password with it.
type User struct {
	Name     string
	Password string
}

// String hides the password.
func (u User) String() string { return u.Name + ":[redacted]" }

// ServerConfig configures the embedded NATS server.
//
// Authentication applies to every client, in-process ones included; clients
// opened with Config.Server get in-process credentials of their own (the
// token, or a random password of an in-process-only user), so only remote
// clients need to be given credentials. Token and Users/NKeys exclude each
// other (the server supports one or the other).
type ServerConfig struct {
	// StoreDir holds JetStream's file store; streams and KV survive a
	// restart with the same directory. Required.
	StoreDir string
	// Listen is host:port for remote clients (workers on other machines);
	// port -1 picks a free one. Empty: no network listener at all, clients
	// in this process connect in-process. A host other than a loopback
	// address (127.0.0.0/8, ::1, localhost) requires Token, Users or NKeys.
	Listen string
	// Token, when set, is required from every client.
	Token string
	// Users may connect with user name and password.
	Users []User
	// NKeys are public user nkeys ("U…", 56 characters) that may connect by
	// signing the server's nonce with their seed (no JWT, no operator).
	NKeys []string
	// TLSCert and TLSKey make the network listener require TLS (PEM files).
	TLSCert, TLSKey string
	// TLSClientCA, with TLSCert, requires a client certificate signed by
	// this CA bundle (mutual TLS).
	TLSClientCA string
	// Name is the server name (default "sluice").
	Name string
	// MaxStore caps JetStream file storage in bytes (0: server default).
	MaxStore int64
	// Log turns on the server's own log on stderr.
	Log bool
}

// inProcessUser names the user that clients in this process connect as
// when the server has users or nkeys; its password is random per start and
// the server accepts it only on in-process connections.
const inProcessUser = "sluice-in-process"

// Server is an embedded nats-server with JetStream, running in this process.
type Server struct {
	ns  *server.Server
	cfg ServerConfig
	// local are the credentials in-process clients present.
	localUser, localPassword, localToken string
}

// authConfigured reports whether clients must authenticate.
func (c ServerConfig) authConfigured() bool {
	return c.Token != "" || len(c.Users) > 0 || len(c.NKeys) > 0
}

// IsLoopback reports whether host (an address or "localhost") only reaches
// this machine. The empty host and unspecified addresses (0.0.0.0, ::) bind
// every interface and are not loopback.
func IsLoopback(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(strings.Trim(host, "[]"))
	return ip != nil && ip.IsLoopback()
}

// StartServer starts an embedded server and waits until it accepts clients.
func StartServer(cfg ServerConfig) (*Server, error) {
	if cfg.StoreDir == "" {
		return nil, errors.New("queue: embedded server needs a store directory")
	}
	dir, err := filepath.Abs(cfg.StoreDir)
	if err != nil {
		return nil, fmt.Errorf("queue: store directory %s: %w", cfg.StoreDir, err)
	}
	if cfg.Name == "" {
		cfg.Name = "sluice"
	}
	opts := &server.Options{
		ServerName:        cfg.Name,
		JetStream:         true,
		StoreDir:          dir,
		JetStreamMaxStore: cfg.MaxStore,
		NoSigs:            true,
		NoLog:             !cfg.Log,
		MaxPayload:        MaxMessage,
	}
	s := &Server{cfg: cfg}
	if err := s.configureAuth(opts); err != nil {
		return nil, err
	}
	if cfg.Listen == "" {
		opts.DontListen = true
		if cfg.TLSCert != "" || cfg.TLSKey != "" || cfg.TLSClientCA != "" {
			return nil, errors.New("queue: embedded server TLS needs a listen address")
		}
	} else {
		host, port, err := net.SplitHostPort(cfg.Listen)
		if err != nil {
			return nil, fmt.Errorf("queue: listen address %q: %w", cfg.Listen, err)
		}
		p, err := strconv.Atoi(port)
		if err != nil || p < -1 || p > 65535 {
			return nil, fmt.Errorf("queue: listen address %q: bad port", cfg.Listen)
		}
		if !IsLoopback(host) && !cfg.authConfigured() {
			return nil, fmt.Errorf("queue: refusing to listen for NATS clients on %s without authentication (give a token, users or nkeys, or listen on 127.0.0.1)", cfg.Listen)
		}
		opts.Host, opts.Port = host, p
		if err := configureTLS(opts, cfg); err != nil {
			return nil, err
		}
	}
	ns, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("queue: embedded server: %w", oneLine(err))
	}
	if cfg.Log {
		ns.ConfigureLogger()
	}
	go ns.Start()
	if !ns.ReadyForConnections(30 * time.Second) {
		ns.Shutdown()
		return nil, fmt.Errorf("queue: embedded server with store %s did not become ready", dir)
	}
	s.ns = ns
	return s, nil
}

// configureAuth writes the authentication options and picks the
// credentials of in-process clients.
func (s *Server) configureAuth(opts *server.Options) error {
	cfg := s.cfg
	if cfg.Token != "" && (len(cfg.Users) > 0 || len(cfg.NKeys) > 0) {
		return errors.New("queue: embedded server takes a token or users/nkeys, not both")
	}
	if cfg.Token != "" {
		opts.Authorization = cfg.Token
		s.localToken = cfg.Token
		return nil
	}
	if len(cfg.Users) == 0 && len(cfg.NKeys) == 0 {
		return nil
	}
	for _, u := range cfg.Users {
		if u.Name == "" || u.Password == "" {
			return fmt.Errorf("queue: embedded server user %q has an empty name or password", u.Name)
		}
		if u.Name == inProcessUser {
			return fmt.Errorf("queue: embedded server user name %q is reserved", u.Name)
		}
		opts.Users = append(opts.Users, &server.User{Username: u.Name, Password: u.Password})
	}
	for _, k := range cfg.NKeys {
		if !nkeys.IsValidPublicUserKey(k) {
			return fmt.Errorf("queue: embedded server nkey %.8s… is not a public user nkey", k)
		}
		opts.Nkeys = append(opts.Nkeys, &server.NkeyUser{Nkey: k})
	}
	b := make([]byte, 24)
	if _, err := rand.Read(b); err != nil {
		return fmt.Errorf("queue: in-process password: %w", err)
	}
	s.localUser, s.localPassword = inProcessUser, hex.EncodeToString(b)
	opts.Users = append(opts.Users, &server.User{Username: s.localUser, Password: s.localPassword,
		AllowedConnectionTypes: map[string]struct{}{"IN_PROCESS": {}}})
	return nil
}

// configureTLS turns on TLS for network clients.
func configureTLS(opts *server.Options, cfg ServerConfig) error {
	if cfg.TLSCert == "" && cfg.TLSKey == "" {
		if cfg.TLSClientCA != "" {
			return errors.New("queue: embedded server client CA needs a server certificate and key")
		}
		return nil
	}
	if cfg.TLSCert == "" || cfg.TLSKey == "" {
		return errors.New("queue: embedded server TLS needs both a certificate and a key file")
	}
	tc, err := server.GenTLSConfig(&server.TLSConfigOpts{
		CertFile: cfg.TLSCert, KeyFile: cfg.TLSKey, CaFile: cfg.TLSClientCA, Verify: cfg.TLSClientCA != "",
	})
	if err != nil {
		return fmt.Errorf("queue: embedded server TLS (%s, %s): %w", cfg.TLSCert, cfg.TLSKey, oneLine(err))
	}
	opts.TLSConfig, opts.TLS, opts.TLSTimeout = tc, true, 2
	opts.TLSVerify = cfg.TLSClientCA != ""
	return nil
}

// ParseUsers reads a users file of the embedded server. Each line is empty,
// a comment starting with '#', "NAME PASSWORD" (the password may be a
// bcrypt hash; it may not contain spaces) or one public user nkey ("U…").
// name is used in error messages.
func ParseUsers(name string, data []byte) ([]User, []string, error) {
	var users []User
	var keys []string
	seen := map[string]bool{}
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 4096), 4096)
	line := 0
	for sc.Scan() {
		line++
		f := strings.Fields(sc.Text())
		if len(f) == 0 || strings.HasPrefix(f[0], "#") {
			continue
		}
		switch len(f) {
		case 1:
			if !nkeys.IsValidPublicUserKey(f[0]) {
				return nil, nil, fmt.Errorf("queue: users file %s line %d: a single field must be a public user nkey (U…)", name, line)
			}
			if seen[f[0]] {
				return nil, nil, fmt.Errorf("queue: users file %s line %d: nkey listed twice", name, line)
			}
			seen[f[0]] = true
			keys = append(keys, f[0])
		case 2:
			if f[0] == inProcessUser || seen[f[0]] {
				return nil, nil, fmt.Errorf("queue: users file %s line %d: user %q reserved or listed twice", name, line, f[0])
			}
			seen[f[0]] = true
			users = append(users, User{Name: f[0], Password: f[1]})
		default:
			// The line may hold a password: never repeat it.
			return nil, nil, fmt.Errorf("queue: users file %s line %d: want NAME PASSWORD or one nkey, got %d fields", name, line, len(f))
		}
	}
	if err := sc.Err(); err != nil {
		return nil, nil, fmt.Errorf("queue: users file %s line %d: %w", name, line+1, err)
	}
	if len(users)+len(keys) == 0 {
		return nil, nil, fmt.Errorf("queue: users file %s lists no users", name)
	}
	return users, keys, nil
}

// LoadUsers reads and parses a users file (see ParseUsers).
func LoadUsers(path string) ([]User, []string, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("queue: users file %s: %w", path, pathErr(err))
	}
	return ParseUsers(path, data)
}

// ClientURL returns nats://host:port for network clients, or "" when the
// server has no listener.
func (s *Server) ClientURL() string {
	if s.cfg.Listen == "" {
		return ""
	}
	return s.ns.ClientURL() // tls://… when TLS is required
}

// StoreDir returns the JetStream store directory.
func (s *Server) StoreDir() string { return s.cfg.StoreDir }

// Shutdown stops the server; the store directory is left as it is.
func (s *Server) Shutdown() {
	s.ns.Shutdown()
	s.ns.WaitForShutdown()
}

// scrubbedError is an error whose text is rewritten (on one line, secrets
// hidden) while Unwrap still returns the original, so that callers can
// classify it with errors.Is/As.
type scrubbedError struct {
	msg string
	err error
}

func (e *scrubbedError) Error() string { return e.msg }
func (e *scrubbedError) Unwrap() error { return e.err }

// oneLine returns err with its text on one line and every non-empty secret
// replaced by "[redacted]".
func oneLine(err error, secrets ...string) error {
	msg := strings.ReplaceAll(err.Error(), "\n", " ")
	for _, s := range secrets {
		if s != "" {
			msg = strings.ReplaceAll(msg, s, "[redacted]")
		}
	}
	return &scrubbedError{msg: msg, err: err}
}

// pathErr drops the path an *os.PathError repeats.
func pathErr(err error) error {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
