package testenv

import (
	"errors"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"syscall"
	"testing"
)

// nobody is the user id a test runs as when it must not be root.
const nobody = 65534

// Unprivileged makes the calling top-level test run as a user that file
// permissions apply to. Root ignores permission bits, so a test that wants
// a real "permission denied" from a read-only directory cannot get one as
// root. When the process is root, Unprivileged runs this test alone again
// in a copy of the test binary as user nobody (65534), fails t when that
// run fails (with its output) and returns true: the caller returns at once.
// Otherwise it returns false and the caller goes on.
func Unprivileged(t *testing.T) (ranElsewhere bool) {
	t.Helper()
	if os.Geteuid() != 0 {
		return false
	}
	if strings.Contains(t.Name(), "/") {
		t.Fatalf("testenv: Unprivileged works for top-level tests only, not %s", t.Name())
	}
	exe, err := os.Executable()
	if err != nil {
		t.Fatalf("testenv: test binary: %v", err)
	}
	// The go tool builds test binaries in a directory only root can enter.
	dir, err := os.MkdirTemp("", "sluice-unprivileged-")
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { os.RemoveAll(dir) })
	if err := os.Chmod(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	bin := filepath.Join(dir, filepath.Base(exe))
	if err := copyFile(exe, bin, 0o755); err != nil {
		t.Fatalf("testenv: copy test binary: %v", err)
	}
	cmd := exec.Command(bin, "-test.run=^"+regexp.QuoteMeta(t.Name())+"$", "-test.count=1", "-test.v")
	cmd.Env = append(os.Environ(), "HOME="+dir)
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: &syscall.Credential{Uid: nobody, Gid: nobody}}
	out, err := cmd.CombinedOutput()
	var exit *exec.ExitError
	if err != nil && !errors.As(err, &exit) {
		Missing(t, "cannot run the test as user %d: %v", nobody, err)
	}
	if err != nil {
		t.Fatalf("as user %d: %v\n%s", nobody, err, out)
	}
	if strings.Contains(string(out), "--- SKIP: "+t.Name()+" ") {
		t.Skipf("as user %d the test skipped:\n%s", nobody, out)
	}
	if !strings.Contains(string(out), "--- PASS: "+t.Name()+" ") {
		t.Fatalf("as user %d the test did not pass:\n%s", nobody, out)
	}
	t.Logf("ran as user %d:\n%s", nobody, out)
	return true
}

func copyFile(from, to string, mode os.FileMode) error {
	in, err := os.Open(from)
	if err != nil {
		return err
	}
	defer in.Close()
	out, err := os.OpenFile(to, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, mode)
	if err != nil {
		return err
	}
	if _, err := io.Copy(out, in); err != nil {
		out.Close()
		return err
	}
	return out.Close()
}
