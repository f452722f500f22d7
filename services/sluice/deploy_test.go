package main

import (
	"bufio"
	"errors"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"gopkg.in/yaml.v3"

	"sluice/pkg/queue"
)

// defaultPorts are the HTTP ports the services bind by default (the
// register calls in services.go); deploy/ must use the same.
var defaultPorts = map[string]int{"aggregate": 8470, "run": 8470, "worker": 8471, "ingest": 8472}

// checkArgs checks one sluice command line from deploy/: the command exists
// and every --flag is one it offers (its help lists it).
func checkArgs(t *testing.T, where string, args []string, known map[string][]string) {
	t.Helper()
	if len(args) == 0 {
		t.Errorf("%s: no sluice command", where)
		return
	}
	cmd := args[0]
	if _, ok := known[cmd]; !ok {
		found := false
		for _, c := range commands() {
			found = found || c.name == cmd
		}
		if !found {
			t.Errorf("%s: sluice has no command %q", where, cmd)
			return
		}
		known[cmd] = helpFlags(t, cmd)
	}
	for _, a := range args[1:] {
		name, ok := strings.CutPrefix(a, "--")
		if !ok {
			continue
		}
		name, _, _ = strings.Cut(name, "=")
		if !slices.Contains(known[cmd], name) {
			t.Errorf("%s: sluice %s has no flag --%s", where, cmd, name)
		}
	}
}

// flagValue returns the value of --name in args.
func flagValue(args []string, name string) string {
	for i, a := range args {
		if a == "--"+name && i+1 < len(args) {
			return args[i+1]
		}
		if v, ok := strings.CutPrefix(a, "--"+name+"="); ok {
			return v
		}
	}
	return ""
}

// TestDeployReferencesExist: every sluice command line in deploy/ (the
// Kubernetes manifests, systemd units, the Slurm job script) names a
// command and flags that exist; Kubernetes container ports, scrape
// annotations and --http ports agree with the services' default ports; the
// KEDA triggers name the task stream and its two consumers as pkg/queue
// defines them, the live consumer first and with the lower lag threshold.
// (Seen failing with --watch renamed, a worker port changed, the live lag
// threshold above the batch one, and --http misspelt in the Slurm script.)
func TestDeployReferencesExist(t *testing.T) {
	known := map[string][]string{}
	root := filepath.Join("..", "..", "deploy")
	manifests, _ := filepath.Glob(filepath.Join(root, "kubernetes", "*.yaml"))
	if len(manifests) == 0 {
		t.Fatal("no Kubernetes manifests under deploy/kubernetes")
	}
	containers, triggers := 0, 0
	for _, path := range manifests {
		f, err := os.Open(path)
		if err != nil {
			t.Fatal(err)
		}
		dec := yaml.NewDecoder(f)
		for doc := 1; ; doc++ {
			var m struct {
				Kind     string `yaml:"kind"`
				Metadata struct {
					Name string `yaml:"name"`
				} `yaml:"metadata"`
				Spec struct {
					Template struct {
						Metadata struct {
							Annotations map[string]string `yaml:"annotations"`
						} `yaml:"metadata"`
						Spec struct {
							Containers []struct {
								Name  string   `yaml:"name"`
								Args  []string `yaml:"args"`
								Ports []struct {
									ContainerPort int `yaml:"containerPort"`
								} `yaml:"ports"`
							} `yaml:"containers"`
						} `yaml:"spec"`
					} `yaml:"template"`
					ScaleTargetRef struct {
						Name string `yaml:"name"`
					} `yaml:"scaleTargetRef"`
					Triggers []struct {
						Type     string            `yaml:"type"`
						Metadata map[string]string `yaml:"metadata"`
					} `yaml:"triggers"`
				} `yaml:"spec"`
			}
			err := dec.Decode(&m)
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				t.Fatalf("%s document %d: %v", path, doc, err)
			}
			where := filepath.Base(path) + " " + m.Kind + "/" + m.Metadata.Name
			for _, c := range m.Spec.Template.Spec.Containers {
				containers++
				checkArgs(t, where, c.Args, known)
				want, ok := defaultPorts[c.Args[0]]
				if !ok {
					continue
				}
				if len(c.Ports) != 1 || c.Ports[0].ContainerPort != want {
					t.Errorf("%s: container ports %+v, want %d (sluice %s's default)", where, c.Ports, want, c.Args[0])
				}
				if _, port, _ := strings.Cut(flagValue(c.Args, "http"), ":"); port != strconv.Itoa(want) {
					t.Errorf("%s: --http port %q, want %d", where, port, want)
				}
				if a := m.Spec.Template.Metadata.Annotations["prometheus.io/port"]; a != strconv.Itoa(want) {
					t.Errorf("%s: prometheus.io/port %q, want %d", where, a, want)
				}
			}
			if m.Kind == "ScaledObject" {
				var lags []int
				var consumers []string
				for _, tr := range m.Spec.Triggers {
					triggers++
					if tr.Type != "nats-jetstream" || tr.Metadata["stream"] != queue.StreamTasks {
						t.Errorf("%s: trigger %s on stream %q, want nats-jetstream on %s", where, tr.Type, tr.Metadata["stream"], queue.StreamTasks)
					}
					consumers = append(consumers, tr.Metadata["consumer"])
					n, err := strconv.Atoi(tr.Metadata["lagThreshold"])
					if err != nil || n <= 0 {
						t.Errorf("%s: lagThreshold %q", where, tr.Metadata["lagThreshold"])
					}
					lags = append(lags, n)
				}
				if !slices.Equal(consumers, []string{queue.ConsumerLive, queue.ConsumerBatch}) {
					t.Errorf("%s: triggers on consumers %v, want %s then %s", where, consumers, queue.ConsumerLive, queue.ConsumerBatch)
				} else if lags[0] >= lags[1] {
					t.Errorf("%s: live lag threshold %d is not below the batch one %d: live work must scale the pool first", where, lags[0], lags[1])
				}
			}
		}
		f.Close()
	}
	if containers < 3 || triggers < 2 {
		t.Errorf("read %d containers and %d triggers from deploy/kubernetes; want the aggregator, ingest and worker and two triggers", containers, triggers)
	}

	// systemd units: ExecStart=/path/sluice CMD FLAGS…
	units, _ := filepath.Glob(filepath.Join(root, "systemd", "*.service"))
	lines := 0
	for _, u := range units {
		b, err := os.ReadFile(u)
		if err != nil {
			t.Fatal(err)
		}
		for _, l := range strings.Split(string(b), "\n") {
			if rest, ok := strings.CutPrefix(l, "ExecStart="); ok {
				f := strings.Fields(rest)
				if len(f) > 1 && filepath.Base(f[0]) == "sluice" {
					lines++
					checkArgs(t, filepath.Base(u), f[1:], known)
				}
			}
		}
	}
	// The Slurm job script: the exec line, continued with backslashes.
	sb, err := os.Open(filepath.Join(root, "slurm", "sluice-workers.sbatch"))
	if err != nil {
		t.Fatal(err)
	}
	defer sb.Close()
	var exec []string
	sc := bufio.NewScanner(sb)
	for sc.Scan() {
		l := strings.TrimSpace(sc.Text())
		if strings.HasPrefix(l, "exec ") || (len(exec) > 0 && strings.HasSuffix(exec[len(exec)-1], "\\")) {
			exec = append(exec, l)
		}
	}
	words := strings.Fields(strings.ReplaceAll(strings.Join(exec, " "), "\\", " "))
	if len(words) < 3 || words[2] != "worker" || flagValue(words, "exit-when-idle") == "" {
		t.Errorf("sluice-workers.sbatch: exec line %q does not run a worker with --exit-when-idle", strings.Join(words, " "))
	} else {
		lines++
		checkArgs(t, "sluice-workers.sbatch", words[2:], known)
	}
	if lines < 3 {
		t.Errorf("read %d sluice command lines from the systemd units and the Slurm script, want 3", lines)
	}
}
