package testenv

import (
	"encoding/json"
	"fmt"
	"net/http"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// NATSCluster is a JetStream cluster of nats-server processes, one per test
// host (network namespace): clients on 4222, routes on 6222, monitoring on
// 8222 of each host's address.
type NATSCluster struct {
	Nodes []*NATSNode
	t     testing.TB
	bin   string
}

// NATSNode is one server of a NATSCluster.
type NATSNode struct {
	Name string
	Host *Host
	Dir  string
	p    *process
	c    *NATSCluster
}

// URL is the node's client URL.
func (n *NATSNode) URL() string { return "nats://" + n.Host.Addr + ":4222" }

func (n *NATSNode) monitor() string { return "http://" + n.Host.Addr + ":8222" }

// StartNATSCluster starts one JetStream server per host, routed to each
// other, and waits until the cluster has a meta leader.
func StartNATSCluster(t testing.TB, hosts ...*Host) *NATSCluster {
	t.Helper()
	bin := requireBinary(t, "nats-server", "SLUICE_NATS_BIN", "go install github.com/nats-io/nats-server/v2@v2.15.2")
	c := &NATSCluster{t: t, bin: bin}
	for i, h := range hosts {
		c.Nodes = append(c.Nodes, &NATSNode{Name: fmt.Sprintf("n%d", i+1), Host: h, Dir: t.TempDir(), c: c})
	}
	t.Cleanup(func() {
		for _, n := range c.Nodes {
			if n.p != nil {
				n.p.stop(10 * time.Second)
				if t.Failed() {
					t.Logf("testenv: nats-server %s log:\n%s", n.Name, tail(n.p.log.String()))
				}
			}
		}
	})
	for _, n := range c.Nodes {
		n.launch()
	}
	c.WaitLeader(2 * time.Minute)
	return c
}

// URLs is the client URL list of every node.
func (c *NATSCluster) URLs() string {
	var u []string
	for _, n := range c.Nodes {
		u = append(u, n.URL())
	}
	return strings.Join(u, ",")
}

func (n *NATSNode) launch() {
	var routes []string
	for _, o := range n.c.Nodes {
		routes = append(routes, "nats://"+o.Host.Addr+":6222")
	}
	args := []string{"netns", "exec", n.Host.NS, n.c.bin,
		"-js", "-sd", filepath.Join(n.Dir, "js"), "-n", n.Name,
		"-a", n.Host.Addr, "-p", "4222", "-m", "8222",
		"--cluster_name", "sluice", "--cluster", "nats://" + n.Host.Addr + ":6222",
		"--routes", strings.Join(routes, ","),
	}
	n.p = start(n.c.t, "nats-server "+n.Name, "ip", nil, args...)
	if err := n.p.waitReady(func() bool { return httpStatus(n.monitor()+"/varz") == http.StatusOK }); err != nil {
		n.c.t.Fatal(err)
	}
}

// Kill kills the node's server (SIGKILL), as a crash would.
func (n *NATSNode) Kill() { n.p.kill() }

// Start starts a killed node again with its store directory.
func (n *NATSNode) Start() {
	if n.p.exited() {
		n.launch()
	}
}

// jsz is the part of the monitoring endpoint /jsz that the tests read.
type jsz struct {
	Meta *struct {
		Leader string `json:"leader"`
	} `json:"meta_cluster"`
	Accounts []struct {
		Streams []struct {
			Name   string `json:"name"`
			Config *struct {
				Replicas int `json:"num_replicas"`
			} `json:"config"`
			Cluster *struct {
				Leader string `json:"leader"`
			} `json:"cluster"`
		} `json:"stream_detail"`
	} `json:"account_details"`
}

func (n *NATSNode) jsz() (jsz, bool) {
	var j jsz
	cl := http.Client{Timeout: 2 * time.Second}
	resp, err := cl.Get(n.monitor() + "/jsz?accounts=true&streams=true&config=true")
	if err != nil {
		return j, false
	}
	defer resp.Body.Close()
	return j, json.NewDecoder(resp.Body).Decode(&j) == nil
}

// live returns the nodes whose servers run.
func (c *NATSCluster) live() []*NATSNode {
	var l []*NATSNode
	for _, n := range c.Nodes {
		if n.p != nil && !n.p.exited() {
			l = append(l, n)
		}
	}
	return l
}

func (c *NATSCluster) node(name string) *NATSNode {
	for _, n := range c.Nodes {
		if n.Name == name {
			return n
		}
	}
	return nil
}

// MetaLeader returns the JetStream meta leader as a running node reports
// it, or nil when none knows one.
func (c *NATSCluster) MetaLeader() *NATSNode {
	for _, n := range c.live() {
		if j, ok := n.jsz(); ok && j.Meta != nil && j.Meta.Leader != "" {
			if l := c.node(j.Meta.Leader); l != nil && l.p != nil && !l.p.exited() {
				return l
			}
		}
	}
	return nil
}

// StreamLeader returns the node leading stream, or nil when none is known.
func (c *NATSCluster) StreamLeader(stream string) *NATSNode {
	for _, n := range c.live() {
		j, ok := n.jsz()
		if !ok {
			continue
		}
		for _, a := range j.Accounts {
			for _, s := range a.Streams {
				if s.Name == stream && s.Cluster != nil && s.Cluster.Leader != "" {
					if l := c.node(s.Cluster.Leader); l != nil && l.p != nil && !l.p.exited() {
						return l
					}
				}
			}
		}
	}
	return nil
}

// StreamReplicas returns the configured replicas of stream as a running
// node reports them (0 when no node knows the stream).
func (c *NATSCluster) StreamReplicas(stream string) int {
	for _, n := range c.live() {
		j, ok := n.jsz()
		if !ok {
			continue
		}
		for _, a := range j.Accounts {
			for _, s := range a.Streams {
				if s.Name == stream && s.Config != nil {
					return s.Config.Replicas
				}
			}
		}
	}
	return 0
}

// WaitLeader waits until a running node names a running meta leader and
// returns how long that took.
func (c *NATSCluster) WaitLeader(limit time.Duration) time.Duration {
	c.t.Helper()
	t0 := time.Now()
	for time.Since(t0) < limit {
		if c.MetaLeader() != nil {
			return time.Since(t0)
		}
		time.Sleep(100 * time.Millisecond)
	}
	c.t.Fatalf("testenv: no JetStream meta leader after %v", limit)
	return 0
}
