package testenv

import (
	"crypto/rand"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"testing"
	"time"
)

// Slurm is a private one-node Slurm cluster for a test: its own munged
// (own key and socket), slurmctld and slurmd, on free loopback ports, with
// every file under a temporary directory. Nothing of the machine's own
// Slurm or MUNGE set-up (/etc/slurm, /etc/munge, system services) is read,
// changed or stopped; the client commands find the cluster through
// SLURM_CONF in Env.
type Slurm struct {
	// Dir holds the configuration, state, spool and logs.
	Dir string
	// Conf is the slurm.conf path.
	Conf string
	// Node is the node name (this machine's host name).
	Node string

	t     testing.TB
	procs []*process
}

// StartSlurm starts the cluster and waits until its node is idle; it is
// stopped when t ends, after every job still in it has been cancelled.
// slurmd launches jobs as their owner and must run as root, so the test is
// skipped (CI unset) or failed (CI set) when not root or when slurmctld,
// slurmd, munged or sbatch are missing (Debian: slurm-wlm, munge).
func StartSlurm(t testing.TB) *Slurm {
	t.Helper()
	if os.Geteuid() != 0 {
		Missing(t, "a Slurm test cluster needs root (slurmd launches jobs as their owner)")
	}
	bins := map[string]string{}
	for _, name := range []string{"munged", "slurmctld", "slurmd", "sbatch", "sinfo", "squeue", "scontrol", "scancel"} {
		p := FindBinary(name, "SLUICE_"+strings.ToUpper(name)+"_BIN")
		if p == "" {
			for _, dir := range []string{"/usr/sbin", "/usr/bin"} {
				if isExec(filepath.Join(dir, name)) {
					p = filepath.Join(dir, name)
				}
			}
		}
		if p == "" {
			Missing(t, "%s not found (install: apt-get install slurm-wlm munge)", name)
		}
		bins[name] = p
	}
	host, err := os.Hostname()
	if err != nil {
		t.Fatalf("testenv: host name: %v", err)
	}
	// The socket path must stay short (sun_path holds 108 bytes), so the
	// directory is made under /tmp rather than t.TempDir's longer path.
	dir, err := os.MkdirTemp("", "slurm-")
	if err != nil {
		t.Fatalf("testenv: %v", err)
	}
	s := &Slurm{t: t, Dir: dir, Conf: filepath.Join(dir, "slurm.conf"), Node: host}
	t.Cleanup(func() {
		s.stop()
		if !t.Failed() {
			os.RemoveAll(dir)
		} else {
			t.Logf("testenv: Slurm files kept in %s", dir)
		}
	})
	for _, d := range []string{"state", "spool"} {
		if err := os.Mkdir(filepath.Join(dir, d), 0o700); err != nil {
			t.Fatalf("testenv: %v", err)
		}
	}
	key := make([]byte, 1024)
	rand.Read(key)
	keyFile := filepath.Join(dir, "munge.key")
	if err := os.WriteFile(keyFile, key, 0o400); err != nil {
		t.Fatalf("testenv: %v", err)
	}
	sock := filepath.Join(dir, "munge.sock")
	s.procs = append(s.procs, start(t, "munged", bins["munged"], nil, "--foreground", "--force",
		"--socket="+sock, "--key-file="+keyFile, "--pid-file="+filepath.Join(dir, "munged.pid"),
		"--seed-file="+filepath.Join(dir, "munged.seed"), "--log-file="+filepath.Join(dir, "munged.log")))
	if err := s.procs[0].waitReady(func() bool { _, err := os.Stat(sock); return err == nil }); err != nil {
		t.Fatal(err)
	}
	conf := fmt.Sprintf(`# private test cluster written by sluice's testenv
ClusterName=sluicetest
SlurmctldHost=%[1]s(127.0.0.1)
SlurmctldPort=%[2]d
SlurmdPort=%[3]d
AuthType=auth/munge
AuthInfo=socket=%[4]s
CredType=cred/munge
SlurmUser=root
SlurmdUser=root
StateSaveLocation=%[5]s/state
SlurmdSpoolDir=%[5]s/spool
SlurmctldPidFile=%[5]s/slurmctld.pid
SlurmdPidFile=%[5]s/slurmd.pid
SlurmctldLogFile=%[5]s/slurmctld.log
SlurmdLogFile=%[5]s/slurmd.log
PlugStackConfig=%[5]s/plugstack.conf
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
MpiDefault=none
ReturnToService=2
SchedulerType=sched/backfill
JobCompType=jobcomp/none
AccountingStorageType=accounting_storage/none
MinJobAge=600
NodeName=%[1]s NodeAddr=127.0.0.1 CPUs=%[6]d RealMemory=1000 State=UNKNOWN
PartitionName=batch Nodes=%[1]s Default=YES MaxTime=INFINITE State=UP
`, host, FreePort(t), FreePort(t), sock, dir, runtime.NumCPU())
	if err := os.WriteFile(s.Conf, []byte(conf), 0o644); err != nil {
		t.Fatalf("testenv: %v", err)
	}
	if err := os.WriteFile(filepath.Join(dir, "plugstack.conf"), nil, 0o644); err != nil {
		t.Fatalf("testenv: %v", err)
	}
	ctld := start(t, "slurmctld", bins["slurmctld"], s.Env(), "-D", "-f", s.Conf)
	s.procs = append(s.procs, ctld)
	d := start(t, "slurmd", bins["slurmd"], s.Env(), "-D", "-f", s.Conf, "-N", host)
	s.procs = append(s.procs, d)
	var last string
	err = d.waitReady(func() bool {
		if ctld.exited() {
			return true // reported below
		}
		out, _ := s.Command(nil, bins["sinfo"], "-h", "-N", "-o", "%t").CombinedOutput()
		last = strings.TrimSpace(string(out))
		return last == "idle"
	})
	if ctld.exited() {
		t.Fatalf("testenv: slurmctld exited: %v\n%s\n%s", ctld.err, tail(ctld.log.String()), s.Log("slurmctld.log"))
	}
	if err != nil {
		t.Fatalf("%v\nsinfo: %s\nslurmctld.log:\n%s", err, last, s.Log("slurmctld.log"))
	}
	return s
}

// Env returns the environment entries that point Slurm's commands at this
// cluster.
func (s *Slurm) Env() []string { return []string{"SLURM_CONF=" + s.Conf} }

// Command returns a Slurm client command (sbatch, squeue, scontrol …) bound
// to this cluster, with extra environment entries.
func (s *Slurm) Command(env []string, name string, args ...string) *exec.Cmd {
	cmd := exec.Command(name, args...)
	cmd.Env = append(append(os.Environ(), s.Env()...), env...)
	return cmd
}

// Log returns the tail of one of the cluster's log files (slurmctld.log,
// slurmd.log, munged.log).
func (s *Slurm) Log(name string) string {
	b, err := os.ReadFile(filepath.Join(s.Dir, name))
	if err != nil {
		return err.Error()
	}
	return tail(string(b))
}

// stop cancels every job of the cluster, waits (at most 30 s) until none is
// left, and stops slurmd, slurmctld and munged in that order.
func (s *Slurm) stop() {
	if len(s.procs) == 3 {
		s.Command(nil, "scancel", "--full", "--partition=batch").Run()
		deadline := time.Now().Add(30 * time.Second)
		for time.Now().Before(deadline) {
			out, err := s.Command(nil, "squeue", "-h", "-o", "%i").Output()
			if err != nil || strings.TrimSpace(string(out)) == "" {
				break
			}
			time.Sleep(200 * time.Millisecond)
		}
	}
	for i := len(s.procs) - 1; i >= 0; i-- {
		s.procs[i].stop(10 * time.Second)
	}
}
