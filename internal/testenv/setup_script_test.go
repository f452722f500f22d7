package testenv

import (
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// repoFile reads a file of the repository by its path from the root.
func repoFile(t *testing.T, path string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join("..", "..", path))
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

// comment is a shell comment: '#' at the start of a line or after a blank
// (not the '#' of ${#array[@]}).
var comment = regexp.MustCompile(`(^|\s)#`)

// scriptLines returns the lines of a shell script without comments.
func scriptLines(src string) []string {
	var out []string
	for _, l := range strings.Split(src, "\n") {
		if m := comment.FindStringIndex(l); m != nil && !strings.ContainsAny(l[:m[0]], `'"`) {
			l = l[:m[0]]
		}
		if strings.TrimSpace(l) != "" {
			out = append(out, l)
		}
	}
	return out
}

// harmful matches commands that stop, kill or reconfigure something the
// set-up did not start. A beamline node running the tests may also run its
// own monitoring Prometheus; the tests start their own servers on free ports.
var harmful = regexp.MustCompile(`\b(pkill|killall|kill|systemctl|service|update-rc\.d|invoke-rc\.d)\b`)

// TestSetupScriptStopsNothing: scripts/setup-test-env (run by every
// `make test`) never stops, kills or reconfigures anything.
func TestSetupScriptStopsNothing(t *testing.T) {
	src := repoFile(t, "scripts/setup-test-env")
	for _, l := range scriptLines(src) {
		if m := harmful.FindString(l); m != "" {
			t.Errorf("scripts/setup-test-env: %q on line %q (set-up must not stop or kill what it did not start)", m, strings.TrimSpace(l))
		}
	}
	// The check itself can fail: the line the first version of the script had.
	if harmful.FindString(scriptLines("pkill -x prometheus 2>/dev/null || true")[0]) == "" ||
		harmful.FindString("if command -v systemctl >/dev/null 2>&1; then systemctl stop prometheus; fi") == "" {
		t.Fatal("the pattern misses the lines it is meant to catch")
	}
	if bash, err := exec.LookPath("bash"); err == nil {
		if out, err := exec.Command(bash, "-n", filepath.Join("..", "..", "scripts", "setup-test-env")).CombinedOutput(); err != nil {
			t.Errorf("bash -n scripts/setup-test-env: %v\n%s", err, out)
		}
	}
}

// TestSetupScriptCoversProtoImports: every well-known type the .proto files
// import is checked for as a file by the set-up, and the Debian package that
// holds it (libprotobuf-dev; protobuf-compiler only recommends it, so
// --no-install-recommends leaves the files out) is installed.
func TestSetupScriptCoversProtoImports(t *testing.T) {
	src := repoFile(t, "scripts/setup-test-env")
	if !strings.Contains(src, "libprotobuf-dev") || !strings.Contains(src, `/usr/include/$f`) {
		t.Error("scripts/setup-test-env does not install libprotobuf-dev or does not check /usr/include for the imported .proto files")
	}
	protos, err := filepath.Glob(filepath.Join("..", "..", "proto", "sluice", "v1", "*.proto"))
	if err != nil || len(protos) == 0 {
		t.Fatalf("no .proto files found (%v)", err)
	}
	imp := regexp.MustCompile(`import "(google/protobuf/[^"]+)"`)
	n := 0
	for _, p := range protos {
		b, err := os.ReadFile(p)
		if err != nil {
			t.Fatal(err)
		}
		n += len(imp.FindAllSubmatch(b, -1))
	}
	if n == 0 {
		t.Log("the .proto files import no well-known types")
	}
	// The script derives the list from the same import lines; make sure its
	// pattern matches the form the files use.
	if !strings.Contains(src, `import "google/protobuf/`) {
		t.Error(`scripts/setup-test-env does not read the 'import "google/protobuf/…"' lines of the .proto files`)
	}
}

// TestCIRunsReadmeTestCommand: .ci/run calls the test command the README
// gives, so what CI runs is what a new user runs.
func TestCIRunsReadmeTestCommand(t *testing.T) {
	readme := repoFile(t, "README.md")
	ci := repoFile(t, ".ci/run")
	if !strings.Contains(readme, "make test ") && !strings.Contains(readme, "make test\n") {
		t.Fatal("README.md does not give `make test` as the test command")
	}
	found := false
	for _, l := range scriptLines(ci) {
		if strings.TrimSpace(l) == "make test" || strings.HasPrefix(strings.TrimSpace(l), "make test ") {
			found = true
		}
	}
	if !found {
		t.Error(".ci/run does not call `make test`")
	}
}
