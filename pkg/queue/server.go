package queue

import (
	"errors"
	"fmt"
	"net"
	"path/filepath"
	"strconv"
	"time"

	"github.com/nats-io/nats-server/v2/server"
)

// ServerConfig configures the embedded NATS server.
type ServerConfig struct {
	// StoreDir holds JetStream's file store; streams and KV survive a
	// restart with the same directory. Required.
	StoreDir string
	// Listen is host:port for remote clients (workers on other machines);
	// port -1 picks a free one. Empty: no network listener at all, clients
	// in this process connect in-process.
	Listen string
	// Token, when set, is required from network clients (nats://token@host:port).
	Token string
	// Name is the server name (default "sluice").
	Name string
	// MaxStore caps JetStream file storage in bytes (0: server default).
	MaxStore int64
	// Log turns on the server's own log on stderr.
	Log bool
}

// Server is an embedded nats-server with JetStream, running in this process.
type Server struct {
	ns  *server.Server
	cfg ServerConfig
}

// StartServer starts an embedded server and waits until it accepts clients.
func StartServer(cfg ServerConfig) (*Server, error) {
	if cfg.StoreDir == "" {
		return nil, errors.New("queue: embedded server needs a store directory")
	}
	dir, err := filepath.Abs(cfg.StoreDir)
	if err != nil {
		return nil, fmt.Errorf("queue: store directory %s: %v", cfg.StoreDir, err)
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
	if cfg.Listen == "" {
		opts.DontListen = true
	} else {
		host, port, err := net.SplitHostPort(cfg.Listen)
		if err != nil {
			return nil, fmt.Errorf("queue: listen address %q: %v", cfg.Listen, err)
		}
		p, err := strconv.Atoi(port)
		if err != nil || p < -1 || p > 65535 {
			return nil, fmt.Errorf("queue: listen address %q: bad port", cfg.Listen)
		}
		opts.Host, opts.Port = host, p
		opts.Authorization = cfg.Token
	}
	ns, err := server.NewServer(opts)
	if err != nil {
		return nil, fmt.Errorf("queue: embedded server: %v", err)
	}
	if cfg.Log {
		ns.ConfigureLogger()
	}
	go ns.Start()
	if !ns.ReadyForConnections(30 * time.Second) {
		ns.Shutdown()
		return nil, fmt.Errorf("queue: embedded server with store %s did not become ready", dir)
	}
	return &Server{ns: ns, cfg: cfg}, nil
}

// ClientURL returns nats://host:port for network clients, or "" when the
// server has no listener.
func (s *Server) ClientURL() string {
	if s.cfg.Listen == "" {
		return ""
	}
	return s.ns.ClientURL()
}

// StoreDir returns the JetStream store directory.
func (s *Server) StoreDir() string { return s.cfg.StoreDir }

// Shutdown stops the server; the store directory is left as it is.
func (s *Server) Shutdown() {
	s.ns.Shutdown()
	s.ns.WaitForShutdown()
}
