package testenv

import (
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"os"
	"os/exec"
	"strings"
	"testing"
)

// Net is a small network of test hosts on one machine: each host is a
// Linux network namespace with its own address, joined to the others by a
// veth pair on a bridge in the test's own namespace (which gets the
// subnet's .1, so the test process reaches every host). A host can be cut
// off (its link dropped) and brought back. Everything is created with
// Debian's iproute2 under names that carry a random tag, and removed when
// the test ends; nothing that exists before is changed.
type Net struct {
	t      testing.TB
	tag    string
	bridge string
	subnet string // "10.R.S"
	hosts  []*Host
}

// Host is one network namespace of a Net.
type Host struct {
	// Name is the test's name for the host; NS the namespace's name.
	Name, NS string
	// Addr is the host's IPv4 address.
	Addr string

	net  *Net
	link string // the bridge side of the host's veth pair
}

// NewNet creates the bridge. It needs root and the ip command: otherwise
// the test is skipped (CI unset) or failed (CI set).
func NewNet(t testing.TB) *Net {
	t.Helper()
	if os.Geteuid() != 0 {
		Missing(t, "network namespaces need root")
	}
	if _, err := exec.LookPath("ip"); err != nil {
		Missing(t, "the ip command is missing (install: apt-get install iproute2)")
	}
	b := make([]byte, 3)
	rand.Read(b)
	n := &Net{t: t, tag: hex.EncodeToString(b)[:5]}
	// 10.200–249.x.0/24: a random /24 per test, unlikely to meet a route
	// of the machine's (checked below).
	n.subnet = fmt.Sprintf("10.%d.%d", 200+int(b[0])%50, b[1])
	if out, _ := exec.Command("ip", "-4", "route", "show", "to", "match", n.subnet+".1").Output(); strings.Contains(string(out), n.subnet) {
		t.Fatalf("testenv: subnet %s.0/24 is already routed here: %s", n.subnet, out)
	}
	n.bridge = "slb" + n.tag
	t.Cleanup(n.remove)
	n.ip("link", "add", n.bridge, "type", "bridge")
	n.ip("addr", "add", n.subnet+".1/24", "dev", n.bridge)
	n.ip("link", "set", n.bridge, "up")
	return n
}

func (n *Net) ip(args ...string) {
	n.t.Helper()
	if out, err := exec.Command("ip", args...).CombinedOutput(); err != nil {
		n.t.Fatalf("testenv: ip %s: %v: %s", strings.Join(args, " "), err, out)
	}
}

// Host adds a host (a namespace with loopback and one link on the bridge).
func (n *Net) Host(name string) *Host {
	n.t.Helper()
	i := len(n.hosts)
	h := &Host{Name: name, NS: fmt.Sprintf("sl%s-%d", n.tag, i), Addr: fmt.Sprintf("%s.%d", n.subnet, i+2), net: n,
		link: fmt.Sprintf("slv%s%d", n.tag, i)}
	peer := fmt.Sprintf("slp%s%d", n.tag, i)
	n.hosts = append(n.hosts, h)
	n.ip("netns", "add", h.NS)
	n.ip("link", "add", h.link, "type", "veth", "peer", "name", peer)
	n.ip("link", "set", peer, "netns", h.NS)
	n.ip("link", "set", h.link, "master", n.bridge)
	n.ip("link", "set", h.link, "up")
	n.ip("-n", h.NS, "link", "set", "lo", "up")
	n.ip("-n", h.NS, "addr", "add", h.Addr+"/24", "dev", peer)
	n.ip("-n", h.NS, "link", "set", peer, "up")
	n.ip("-n", h.NS, "route", "add", "default", "via", n.subnet+".1")
	return h
}

// Command returns cmd to be run inside the host's namespace.
func (h *Host) Command(name string, args ...string) *exec.Cmd {
	return exec.Command("ip", append([]string{"netns", "exec", h.NS, name}, args...)...)
}

// Cut drops the host's link: nothing reaches it and it reaches nothing,
// while its processes go on running.
func (h *Host) Cut() { h.net.ip("link", "set", h.link, "down") }

// Restore brings the host's link back.
func (h *Host) Restore() { h.net.ip("link", "set", h.link, "up") }

// remove deletes the namespaces (their veth ends go with them) and the
// bridge. Processes in the namespaces must have been stopped before: the
// caller registers their cleanup after NewNet, so it runs first.
func (n *Net) remove() {
	for _, h := range n.hosts {
		exec.Command("ip", "netns", "delete", h.NS).Run()
		exec.Command("ip", "link", "delete", h.link).Run()
	}
	exec.Command("ip", "link", "delete", n.bridge).Run()
}
