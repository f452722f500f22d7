package main

import (
	"context"
	"crypto/sha256"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"google.golang.org/protobuf/proto"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/queue"
	"sluice/pkg/store"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/proto/sluicepb"
)

// badDir is the bad-input corpus (testdata/bad/README.md lists the cases;
// testdata/bad/make.sh regenerates it).
var badDir = filepath.Join("..", "..", "testdata", "bad")

func bad(name string) string { return filepath.Join(badDir, name) }

// oneLineError checks what every rejected input must give: a non-zero exit,
// exactly one line on standard error, and that line naming the input and the
// problem.
func oneLineError(t *testing.T, label string, code int, errs string, wants ...string) {
	t.Helper()
	if code == 0 {
		t.Errorf("%s: exit 0, want non-zero", label)
	}
	lines := strings.Split(strings.TrimRight(errs, "\n"), "\n")
	if errs == "" || len(lines) != 1 {
		t.Errorf("%s: want exactly one line on stderr, got %d:\n%s", label, len(lines), errs)
		return
	}
	if strings.Contains(errs, "goroutine ") || strings.Contains(errs, "panic") {
		t.Errorf("%s: stack or panic on stderr: %s", label, errs)
	}
	if p := packagePrefix(errs); p != "" {
		t.Errorf("%s: error line %q holds the Go package prefix %q", label, strings.TrimSpace(errs), p+":")
	}
	for _, w := range wants {
		if !strings.Contains(errs, w) {
			t.Errorf("%s: error line %q does not contain %q", label, strings.TrimSpace(errs), w)
		}
	}
	t.Logf("%s: %s", label, strings.TrimSpace(errs))
}

// packagePrefix returns the first name of a sluice Go package that opens a
// part of an error line ("sluice: volio: x.raw: …" → "volio"), after
// "sluice: " and the command's own name, or "".
func packagePrefix(line string) string {
	line = strings.TrimPrefix(strings.TrimSpace(line), "sluice: ")
	parts := strings.Split(line, ": ")
	for _, c := range commands() {
		if len(parts) > 1 && parts[0] == c.name {
			parts = parts[1:]
			break
		}
	}
	for _, p := range parts[:len(parts)-1] {
		if slices.Contains(usermsg.Packages, p) {
			return p
		}
	}
	return ""
}

// TestBadInputFiles: `sluice measure` and `sluice segment` on every bad
// volume of the corpus fail with one line naming the file and the problem.
func TestBadInputFiles(t *testing.T) {
	out := filepath.Join(t.TempDir(), "labels.raw")
	cases := []struct {
		file string
		want []string
	}{
		{"truncated.raw", []string{"truncated.raw", "truncated raw volume: got 2000 of 4096 bytes"}},
		{"size-mismatch.raw", []string{"size-mismatch.raw", "size mismatch", "needs 2048"}},
		{"shape-overflow.raw", []string{"shape-overflow.raw", "exceeds the limit"}},
		{"over-limit.raw", []string{"over-limit.raw", "2000×2000×2000 voxels exceeds the limit of 4000000000"}},
		{"nan.raw", []string{"nan.raw", "3 non-finite float32 voxels", "first at z=1 y=2 x=3"}},
		{"tiff-missing-slice", []string{"tiff-missing-slice", "missing slice: z00001.tif is followed by z00003.tif"}},
		{"tiff-mixed-size", []string{"z00002.tif", "slice is 16×10 uint16, the stack is 16×12"}},
		{"tiff-jpeg.tif", []string{"tiff-jpeg.tif", "compression 7 (JPEG) not supported"}},
		{"zarr-bad-json", []string{filepath.Join("zarr-bad-json", ".zarray"), "bad .zarray"}},
		{"zarr-chunks-over-shape", []string{filepath.Join("zarr-chunks-over-shape", ".zarray"), "chunks [64 8 8] larger than shape [4 8 8]"}},
		{"zarr-unknown-dtype", []string{filepath.Join("zarr-unknown-dtype", ".zarray"), `dtype "<i8"`}},
		{"zarr-unknown-compressor", []string{filepath.Join("zarr-unknown-compressor", ".zarray"), `compressor "bz2" not supported`}},
		{"zarr-missing-chunk", []string{filepath.Join("zarr-missing-chunk", "1", "0", "0"), "missing chunk 1.0.0"}},
		{"zarr3-4d", []string{filepath.Join("zarr3-4d", "zarr.json"), "array has 4 dimensions (shape [2 4 8 8]), want 3"}},
		{"zarr3-unknown-codec", []string{filepath.Join("zarr3-unknown-codec", "zarr.json"), `codec "bz2" not supported`}},
		{"zarr3-bad-crc", []string{filepath.Join("zarr3-bad-crc", "c", "0", "0", "0"), "crc32c checksum mismatch"}},
	}
	for _, c := range cases {
		code, _, errs := runCLI(t, "measure", "--no-sample", bad(c.file))
		oneLineError(t, "measure "+c.file, code, errs, c.want...)
		code, _, errs = runCLI(t, "segment", "--no-sample", bad(c.file), out)
		oneLineError(t, "segment "+c.file, code, errs, c.want...)
		if _, err := os.Stat(out); err == nil {
			t.Errorf("segment %s wrote %s", c.file, out)
		}
	}
	// A limit configured on the command line is the one enforced.
	code, _, errs := runCLI(t, "measure", "--max-voxels", "10000", bad("duplicate-step.raw"))
	oneLineError(t, "measure --max-voxels 10000", code, errs, "duplicate-step.raw", "24×24×24 voxels exceeds the limit of 10000")
	// The label path reads the same files through the same readers.
	code, _, errs = runCLI(t, "measure", "--labels", bad("zarr-missing-chunk"))
	oneLineError(t, "measure --labels zarr-missing-chunk", code, errs, "missing chunk 1.0.0")
}

// TestBadConfigs: configs with unknown keys or out-of-range values are
// refused by every command that loads one, in one line naming the file.
func TestBadConfigs(t *testing.T) {
	cases := []struct {
		file string
		want string
	}{
		{"config-unknown-key.yaml", "line 3: unknown key segment.treshold (did you mean segment.threshold?)"},
		{"config-negative-voxel-size.yaml", `voxel_size: voxel size "-2um" is not a positive length`},
		{"config-sigma-zero.yaml", "measure.curvature_sigma 0 out of range"},
		{"config-tile-zero.yaml", "tile 0 out of range 16..1024"},
		{"config-thresholds-order.yaml", "fixed thresholds [30000 18000] must be finite and ascending"},
		{"config-negative-ift.yaml", "interfacial tension must be > 0 N/m, not -0.07"},
	}
	out := filepath.Join(t.TempDir(), "labels.raw")
	for _, c := range cases {
		code, _, errs := runCLI(t, "measure", "--config", bad(c.file), bad("duplicate-step.raw"))
		oneLineError(t, "measure --config "+c.file, code, errs, c.file, c.want)
		code, _, errs = runCLI(t, "segment", "--config", bad(c.file), bad("duplicate-step.raw"), out)
		oneLineError(t, "segment --config "+c.file, code, errs, c.file, c.want)
	}
}

// badInputNode starts a NATS server (embedded, on a loopback port, as a
// separate deployment would be reached) and returns its URL.
func badInputNode(t *testing.T) (*queue.Server, string) {
	t.Helper()
	srv, err := queue.StartServer(queue.ServerConfig{StoreDir: t.TempDir(), Listen: "127.0.0.1:-1"})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(srv.Shutdown)
	return srv, srv.ClientURL()
}

// treeHash hashes every file under dir (relative names → SHA-256).
func treeHash(t *testing.T, dir string) map[string][32]byte {
	t.Helper()
	out := map[string][32]byte{}
	filepath.WalkDir(dir, func(p string, d os.DirEntry, err error) error {
		if err != nil || d.IsDir() {
			return err
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(dir, p)
		out[rel] = sha256.Sum256(b)
		return nil
	})
	return out
}

// TestBadIngest: `sluice ingest` into a local store refuses every bad scan
// and bad name in one line, and the campaign goes on: the step stored
// before is intact, nothing of a refused scan gets a manifest, and the next
// good scan is stored.
func TestBadIngest(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a NATS server")
	}
	_, url := badInputNode(t)
	data := t.TempDir()
	st := filepath.Join(data, "store")
	cfg := campaign.Default()
	cfg.VoxelSize = "3um" // pipelineScene's; some files of the bad corpus carry none
	cfg.DetectSample = false
	cfg.Tile = 32
	cfg.Measure.SkipContact = true
	cfgPath := filepath.Join(data, "c.json")
	if err := writeDemoConfig(cfgPath, cfg); err != nil {
		t.Fatal(err)
	}
	grey := pipelineScene(t, [3]int{32, 32, 32}, 11)
	for _, n := range []string{"scan-0001.raw", "scan-0002.raw"} {
		if err := volio.WriteRaw(filepath.Join(data, n), grey, volio.WriteOptions{}); err != nil {
			t.Fatal(err)
		}
	}
	ingestArgs := func(args ...string) []string {
		// --time: these scans carry no time, and ingest refuses a scan
		// without one (TestIngestNeedsTime).
		return append([]string{"ingest", "--nats", url, "--store", st, "--http", "off", "--config", cfgPath, "--time", "0"}, args...)
	}
	code, out, errs := runCLI(t, ingestArgs("--campaign", "bad", filepath.Join(data, "scan-0001.raw"))...)
	if code != 0 {
		t.Fatalf("good scan: exit %d: %s", code, errs)
	}
	hash := regexp.MustCompile(`parameter hash ([0-9a-f]+)`).FindStringSubmatch(out)
	if hash == nil {
		t.Fatalf("no parameter hash in %q", out)
	}
	step1 := filepath.Join(st, "campaigns", "bad", "steps", "scan-0001")
	before := treeHash(t, step1)
	if len(before) == 0 {
		t.Fatal("first step stored nothing")
	}

	names, err := os.ReadFile(bad("names.txt"))
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		label string
		args  []string
		want  []string
	}{
		{"truncated", []string{"--campaign", "bad", "--step", "trunc", bad("truncated.raw")}, []string{"truncated.raw", "truncated raw volume"}},
		{"shape differs", []string{"--campaign", "bad", bad("shape-differs.raw")}, []string{"shape-differs.raw", "shape 20×20×20 differs from the campaign's reference 32×32×32 (step scan-0001)"}},
		{"duplicate step", []string{"--campaign", "bad", "--step", "scan-0001", bad("duplicate-step.raw")}, []string{"duplicate-step.raw", "step scan-0001 of campaign bad already holds"}},
		{"missing TIFF slice", []string{"--campaign", "bad", "--step", "tiff", bad("tiff-missing-slice")}, []string{"tiff-missing-slice", "missing slice"}},
		{"mixed TIFF slices", []string{"--campaign", "bad", "--step", "tiff", bad("tiff-mixed-size")}, []string{"z00002.tif", "the stack is 16×12"}},
		{"JPEG TIFF", []string{"--campaign", "bad", "--step", "jpeg", bad("tiff-jpeg.tif")}, []string{"tiff-jpeg.tif", "compression 7"}},
		{"missing Zarr chunk", []string{"--campaign", "zarr", bad("zarr-missing-chunk")}, []string{"missing chunk 1.0.0"}},
		{"NaN scan", []string{"--campaign", "nan", bad("nan.raw")}, []string{"nan.raw", "3 non-finite float32 voxels", "first at z=1 y=2 x=3"}},
		{"unknown config key", []string{"--campaign", "other", "--config", bad("config-unknown-key.yaml"), bad("duplicate-step.raw")}, []string{"config-unknown-key.yaml", "treshold"}},
	}
	for _, n := range strings.Fields(string(names)) {
		cases = append(cases,
			struct {
				label string
				args  []string
				want  []string
			}{"campaign " + n, []string{"--campaign", n, bad("duplicate-step.raw")}, []string{fmt.Sprintf("campaign name %q", n)}},
			struct {
				label string
				args  []string
				want  []string
			}{"step " + n, []string{"--campaign", "bad", "--step", n, bad("duplicate-step.raw")}, []string{"duplicate-step.raw", fmt.Sprintf("step name %q", n)}})
	}
	for _, c := range cases {
		args := ingestArgs(c.args...)
		if c.label == "unknown config key" {
			args = append([]string{"ingest", "--nats", url, "--store", st, "--http", "off"}, c.args...)
		}
		code, _, errs := runCLI(t, args...)
		oneLineError(t, "ingest "+c.label, code, errs, c.want...)
	}

	code, _, errs = runCLI(t, ingestArgs("--campaign", "bad", filepath.Join(data, "scan-0002.raw"))...)
	if code != 0 {
		t.Fatalf("good scan after the bad ones: exit %d: %s", code, errs)
	}
	after := treeHash(t, step1)
	if len(after) != len(before) {
		t.Errorf("first step has %d files, had %d", len(after), len(before))
	}
	for k, v := range before {
		if after[k] != v {
			t.Errorf("first step: %s changed or vanished", k)
		}
	}
	steps, _ := os.ReadDir(filepath.Join(st, "campaigns", "bad", "steps"))
	var manifests []string
	for _, s := range steps {
		if _, err := os.Stat(filepath.Join(st, "campaigns", "bad", "steps", s.Name(), "manifest.json")); err == nil {
			manifests = append(manifests, s.Name())
		}
	}
	if strings.Join(manifests, ",") != "scan-0001,scan-0002" {
		t.Errorf("steps with a manifest: %v, want scan-0001 and scan-0002 only", manifests)
	}
	for _, p := range []string{filepath.Join(st, "escape"), filepath.Join(data, "escape"), filepath.Join(st, "campaigns", "bad", "escape")} {
		if _, err := os.Stat(p); err == nil {
			t.Errorf("a bad name reached the store: %s", p)
		}
	}
	t.Run("tasks", func(t *testing.T) { badTasks(t, url, st, hash[1]) })
}

// badTasks publishes a task that is not protobuf and a valid task whose
// tile box lies outside the scan onto the live task subject, runs the real
// worker loop, and checks that each becomes one dead-letter record with a
// one-line reason naming the problem, and that no result is written.
func badTasks(t *testing.T, url, root, hash string) {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	if os.Getenv("SLUICE_TEST_LOG") != "" {
		log = slog.New(slog.NewTextHandler(os.Stderr, nil))
	}
	q, err := queue.Open(ctx, queue.Config{URL: url, Logger: log, Policy: queue.Policy{AckWait: 10 * time.Second, MaxDeliver: 2, RetryDelay: 100 * time.Millisecond}})
	if err != nil {
		t.Fatal(err)
	}
	defer q.Close()
	st, err := store.Open(ctx, root, store.Credentials{})
	if err != nil {
		t.Fatal(err)
	}
	garbage, err := os.ReadFile(bad("task-garbage.bin"))
	if err != nil {
		t.Fatal(err)
	}
	if proto.Unmarshal(garbage, new(sluicepb.TileTask)) == nil {
		t.Fatal("task-garbage.bin decodes as a task")
	}
	raw, err := os.ReadFile(bad("task-box-out-of-range.bin"))
	if err != nil {
		t.Fatal(err)
	}
	task := new(sluicepb.TileTask)
	if err := proto.Unmarshal(raw, task); err != nil {
		t.Fatal(err)
	}
	// The corpus holds a placeholder hash; the plan stored by ingest has
	// the real one, so the worker gets as far as the box check.
	task.ParamHash = hash
	task.ResultKey = "campaigns/bad/steps/scan-0001/tiles/" + hash + "/7.json"
	subject := queue.TaskSubject(sluicepb.Priority_PRIORITY_LIVE, "bad")
	nc := q.Conn()
	if err := nc.Publish(subject, garbage); err != nil {
		t.Fatal(err)
	}
	if _, err := q.PublishTask(ctx, task); err != nil {
		t.Fatal(err)
	}
	// A forged task: a valid box whose result key points at another step's
	// objects. The worker must refuse it rather than overwrite them.
	forged := proto.CloneOf(task)
	forged.Tile = 5 // not a tile ingest published, so not a duplicate id
	forged.Core = &sluicepb.Box{MaxZ: 16, MaxY: 16, MaxX: 16}
	forged.ResultKey = "campaigns/bad/steps/scan-0002/tiles/" + hash + "/5.json"
	if _, err := q.PublishTask(ctx, forged); err != nil {
		t.Fatal(err)
	}
	wctx, stop := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() {
		done <- runWorkers(wctx, q, st, telemetry.NewWorker(prometheus.NewRegistry()), "bad-input-test", 1, log)
	}()
	var dead []*sluicepb.DeadLetter
	for ctx.Err() == nil {
		all, err := q.DeadLetters(ctx, "")
		if err != nil {
			t.Fatal(err)
		}
		dead = all
		if len(all) >= 3 {
			break
		}
		time.Sleep(200 * time.Millisecond)
	}
	stop()
	<-done
	if len(dead) != 3 {
		t.Fatalf("%d dead letters, want 3", len(dead))
	}
	var poison, box, keys bool
	for _, d := range dead {
		t.Logf("dead letter: %s", d.Reason)
		if strings.Contains(d.Reason, "\n") {
			t.Errorf("reason spans lines: %q", d.Reason)
		}
		switch {
		case d.Task == nil && strings.HasPrefix(d.Reason, "poison: ") && string(d.Raw) == string(garbage):
			poison = true
		case d.Task != nil && strings.Contains(d.Reason, "outside scan"):
			box = true
			if d.Deliveries != 1 {
				t.Errorf("box outside the scan was delivered %d times, want 1 (permanent)", d.Deliveries)
			}
		case d.Task != nil && strings.Contains(d.Reason, "result key") && strings.Contains(d.Reason, "scan-0002"):
			keys = true
		}
	}
	if !poison || !box || !keys {
		t.Errorf("dead letters do not name all three problems (poison %v, box %v, forged keys %v)", poison, box, keys)
	}
	if _, err := st.Get(context.Background(), forged.ResultKey); err == nil {
		t.Errorf("a result was written under the forged key")
	}
	if _, err := st.Get(context.Background(), task.ResultKey); err == nil {
		t.Errorf("a result was written for the out-of-range tile")
	}
}
