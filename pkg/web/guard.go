package web

import (
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/url"
	"strings"
	"time"
)

// Access control of the HTTP server (live page, JSON API, /metrics):
//
//   - It listens on loopback unless told otherwise; any other address needs
//     a bearer token, else Serve refuses to start.
//   - With a token every route except /healthz and /readyz wants it, as
//     "Authorization: Bearer TOKEN" (API clients, Prometheus) or as the
//     cookie TokenCookie. A browser gets the cookie by opening any page once
//     with ?token=TOKEN: the server sets the cookie (HttpOnly,
//     SameSite=Strict) and redirects to the same URL without the token, so
//     the token leaves the address bar and the page's own requests (fetch,
//     EventSource) carry the cookie.
//   - Tokens are compared in constant time (SHA-256 of both, then
//     crypto/subtle), so neither content nor length leaks through timing.
//   - No route takes a request body: one larger than MaxBody is answered
//     with 413 before any handler runs. Headers are capped at MaxHeaderBytes.
//   - Timeouts: ReadHeaderTimeout, ReadTimeout, WriteTimeout and IdleTimeout
//     below; the event stream clears its write deadline, since it is meant
//     to stay open.

// TokenCookie is the cookie that carries the token for browsers.
const TokenCookie = "sluice_token"

// Limits of the HTTP server.
const (
	MaxBody           = 64 << 10
	MaxHeaderBytes    = 32 << 10
	ReadHeaderTimeout = 10 * time.Second
	ReadTimeout       = 30 * time.Second
	WriteTimeout      = 60 * time.Second
	IdleTimeout       = 2 * time.Minute
)

// ServeConfig says where and how to serve.
type ServeConfig struct {
	// Addr is host:port; port 0 picks a free one.
	Addr string
	// Token, when set, is required on every route but /healthz and /readyz.
	// Required when Addr is not a loopback address.
	Token string
	// Log receives server errors (default slog.Default()).
	Log *slog.Logger
	// ReadTimeout, WriteTimeout and IdleTimeout override the defaults
	// (the constants above) when positive.
	ReadTimeout, WriteTimeout, IdleTimeout time.Duration
}

func orDefault(d, def time.Duration) time.Duration {
	if d > 0 {
		return d
	}
	return def
}

// isLoopback reports whether host only reaches this machine; the empty host
// and unspecified addresses bind every interface.
func isLoopback(host string) bool {
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(strings.Trim(host, "[]"))
	return ip != nil && ip.IsLoopback()
}

// CheckBind refuses a non-loopback address without a token.
func CheckBind(addr, token string) error {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return fmt.Errorf("web: listen address %q: %w", addr, err)
	}
	if !isLoopback(host) && token == "" {
		return fmt.Errorf("web: refusing to serve HTTP on %s without a bearer token (give --http-token-file or SLUICE_HTTP_TOKEN, or listen on 127.0.0.1)", addr)
	}
	return nil
}

// Serve serves h behind Guard on cfg.Addr until ctx ends and returns the
// address it listens on.
func Serve(ctx context.Context, cfg ServeConfig, h http.Handler) (string, error) {
	if err := CheckBind(cfg.Addr, cfg.Token); err != nil {
		return "", err
	}
	log := cfg.Log
	if log == nil {
		log = slog.Default()
	}
	ln, err := net.Listen("tcp", cfg.Addr)
	if err != nil {
		return "", fmt.Errorf("web: %w", err)
	}
	srv := &http.Server{
		Handler:           Guard(h, cfg.Token),
		ReadHeaderTimeout: min(ReadHeaderTimeout, orDefault(cfg.ReadTimeout, ReadTimeout)),
		ReadTimeout:       orDefault(cfg.ReadTimeout, ReadTimeout),
		WriteTimeout:      orDefault(cfg.WriteTimeout, WriteTimeout),
		IdleTimeout:       orDefault(cfg.IdleTimeout, IdleTimeout),
		MaxHeaderBytes:    MaxHeaderBytes,
		ErrorLog:          slog.NewLogLogger(log.Handler(), slog.LevelWarn),
	}
	go func() {
		if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("http server", "err", err)
		}
	}()
	context.AfterFunc(ctx, func() {
		sctx, cancel := context.WithTimeout(context.Background(), 3*time.Second)
		defer cancel()
		srv.Shutdown(sctx)
	})
	return ln.Addr().String(), nil
}

// Guard wraps h with the body limit and, when token is not empty, the token
// check (see the package's access-control notes).
func Guard(h http.Handler, token string) http.Handler {
	want := sha256.Sum256([]byte(token))
	match := func(got string) bool {
		g := sha256.Sum256([]byte(got))
		return subtle.ConstantTimeCompare(g[:], want[:]) == 1
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.ContentLength > MaxBody {
			http.Error(w, "request body too large", http.StatusRequestEntityTooLarge)
			return
		}
		if r.ContentLength != 0 && r.Body != nil {
			// No route reads a body; one of unknown length is read here,
			// up to the limit, to answer 413 when it is too large.
			r.Body = http.MaxBytesReader(w, r.Body, MaxBody)
			if _, err := io.Copy(io.Discard, r.Body); err != nil {
				var mbe *http.MaxBytesError
				if errors.As(err, &mbe) {
					http.Error(w, "request body too large", http.StatusRequestEntityTooLarge)
					return
				}
				http.Error(w, "bad request body", http.StatusBadRequest)
				return
			}
		}
		if token == "" || r.URL.Path == "/healthz" || r.URL.Path == "/readyz" {
			h.ServeHTTP(w, r)
			return
		}
		if q := r.URL.Query(); q.Has("token") {
			if !match(q.Get("token")) {
				unauthorized(w)
				return
			}
			http.SetCookie(w, &http.Cookie{Name: TokenCookie, Value: token, Path: "/", HttpOnly: true,
				SameSite: http.SameSiteStrictMode, Secure: r.TLS != nil})
			q.Del("token")
			// Only a local path: "//host" would leave the site.
			u := url.URL{Path: "/" + strings.TrimLeft(r.URL.Path, "/"), RawQuery: q.Encode()}
			w.Header().Set("Cache-Control", "no-store")
			http.Redirect(w, r, u.String(), http.StatusSeeOther)
			return
		}
		if a := r.Header.Get("Authorization"); a != "" {
			if scheme, tok, ok := strings.Cut(a, " "); ok && strings.EqualFold(scheme, "Bearer") && match(strings.TrimSpace(tok)) {
				h.ServeHTTP(w, r)
				return
			}
			unauthorized(w)
			return
		}
		if c, err := r.Cookie(TokenCookie); err == nil && match(c.Value) {
			h.ServeHTTP(w, r)
			return
		}
		unauthorized(w)
	})
}

func unauthorized(w http.ResponseWriter) {
	w.Header().Set("WWW-Authenticate", `Bearer realm="sluice"`)
	http.Error(w, "unauthorized: bearer token required", http.StatusUnauthorized)
}
