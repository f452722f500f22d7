// Package ingest stores arriving scans as steps of a campaign and queues
// their tiles: it streams a volume slab by slab into a Zarr v2 array (chunk
// = tile core, zstd) in the object store, writes the step manifest, runs
// pass 1 (histogram → thresholds) from the stored chunks, writes the plan
// and publishes one task per tile. Memory is bounded by one band of chunks
// (tile × tile × nx voxels; one slab, tile height × cross-section, for TIFF
// stacks) plus a few tiles, never the whole volume; pass 1 is skipped when
// the configuration fixes the thresholds (ThresholdsKnown).
package ingest

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"strings"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/register"
	"sluice/pkg/scan"
	"sluice/pkg/segment"
	"sluice/pkg/telemetry"
	"sluice/pkg/volio"
	"sluice/pkg/volume"
	"sluice/proto/sluicepb"
)

// Store is the object storage ingest writes to.
type Store interface {
	Get(ctx context.Context, key string) ([]byte, error)
	Put(ctx context.Context, key string, data []byte) error
}

// Publisher queues tile tasks.
type Publisher interface {
	PublishTask(ctx context.Context, t *sluicepb.TileTask) error
}

// ErrDone is returned for a scan whose step is already stored and measured.
var ErrDone = errors.New("step already ingested and measured")

// Ingester ingests steps.
type Ingester struct {
	Store    Store
	Queue    Publisher
	Metrics  *telemetry.Ingest
	Log      *slog.Logger
	Version  string
	Workers  int           // goroutines for pass 1 (0 = all CPUs)
	ReadOpt  volio.Options // how to read inputs (raw without header etc.)
	Progress func(done, total int64)
	Stepped  func(*sluicepb.StepReady) // called after the tasks are published
}

// Request is one scan to ingest.
type Request struct {
	Campaign string
	Step     string
	Path     string
	// TimeS is the experiment time in seconds when HasTime (from --time,
	// --times or the scan's marker); it wins over a time in the scan's
	// header. TimeFrom says where it came from (stored in the manifest).
	TimeS    float64
	HasTime  bool
	TimeFrom string
	// ModTime, when not zero, dates a scan that has no time from TimeS nor
	// its header (the user asked for it: --time-from-mtime): the step's
	// time is then ModTime less the campaign's modification-time origin,
	// the ModTime of the first scan dated this way (kept in the store, so
	// a restarted watcher counts from the same origin). Without any of
	// them the scan is refused, never stored at t = 0.
	ModTime  time.Time
	Priority sluicepb.Priority
}

// EnsureCampaign writes campaign.json (and the run's config snapshot) if
// the campaign is new, and returns its record. An existing campaign keeps
// its configuration: a different cfg is an error, so one campaign never
// mixes parameter sets silently (reprocess for that).
func EnsureCampaign(ctx context.Context, st Store, name string, cfg campaign.Config, version, scenario string) (campaign.Record, error) {
	c, err := layout.NewCampaign(name)
	if err != nil {
		return campaign.Record{}, err
	}
	b, err := st.Get(ctx, c.Config())
	if err == nil {
		var r campaign.Record
		if err := json.Unmarshal(b, &r); err != nil {
			return r, fmt.Errorf("ingest: %s: %w", c.Config(), err)
		}
		if r.Current != cfg.Hash() {
			return r, fmt.Errorf("ingest: campaign %s exists with parameter hash %s, not %s (use the same config, or reprocess)", name, r.Current, cfg.Hash())
		}
		return r, nil
	}
	if !errors.Is(err, fs.ErrNotExist) {
		return campaign.Record{}, err
	}
	r := campaign.Record{Name: name, Current: cfg.Hash(), Config: cfg, Runs: []string{cfg.Hash()}, Version: version,
		Scenario: scenario, CreatedAt: time.Now().UTC().Format(time.RFC3339)}
	if err := campaign.PutJSON(ctx, st, campaign.RunConfigKey(c, r.Current), cfg); err != nil {
		return r, err
	}
	return r, campaign.PutJSON(ctx, st, c.Config(), r)
}

// Ingest stores one scan as a step and queues its tiles under the
// campaign's current configuration.
func (in *Ingester) Ingest(ctx context.Context, req Request) (*sluicepb.StepReady, error) {
	start := time.Now()
	ready, err := in.ingest(ctx, req)
	if err == nil && in.Metrics != nil {
		in.Metrics.Steps.Inc()
		in.Metrics.Seconds.Observe(time.Since(start).Seconds())
	}
	if err == nil || errors.Is(err, ErrDone) {
		// A scan rejected earlier and now stored (a fixed copy) leaves
		// the list of rejected scans.
		if d, ok := in.Store.(campaign.Deleter); ok {
			if c, cerr := layout.NewCampaign(req.Campaign); cerr == nil {
				if derr := campaign.ClearRejection(ctx, d, c, req.Step); derr != nil && err == nil {
					return ready, fmt.Errorf("ingest: %s: %w", req.Path, derr)
				}
			}
		}
	}
	return ready, err
}

// Reject records that the scan of req was given up after attempts tries
// with err as the last error: a record in the campaign's store (shown by
// the live page, the API, `sluice status` and the report) and one count of
// sluice_steps_rejected_total. It is called once per scan given up, not
// per attempt, so the metric counts scans.
func (in *Ingester) Reject(ctx context.Context, req Request, attempts int, err error) error {
	if in.Metrics != nil {
		in.Metrics.Rejected.Inc()
	}
	c, cerr := layout.NewCampaign(req.Campaign)
	if cerr != nil {
		return fmt.Errorf("ingest: %s: %w", req.Path, cerr)
	}
	// The reason is read on the live page, in the API, `sluice status`
	// and the report: without Go package prefixes.
	reason := usermsg.Clean(err.Error(), "", req.Path, req.Step, req.Campaign)
	r := campaign.Rejection{Step: req.Step, File: req.Path, Reason: reason, Attempts: attempts,
		At: time.Now().UTC().Format(time.RFC3339)}
	if perr := campaign.PutRejection(ctx, in.Store, c, r); perr != nil {
		return fmt.Errorf("ingest: recording the rejection of %s: %w", req.Path, perr)
	}
	return nil
}

func (in *Ingester) ingest(ctx context.Context, req Request) (*sluicepb.StepReady, error) {
	step, err := layout.NewStep(req.Campaign, req.Step)
	if err != nil {
		return nil, fmt.Errorf("ingest: %s: %w", req.Path, err)
	}
	rec, err := campaign.LoadRecord(ctx, in.Store, step.Campaign())
	if err != nil {
		return nil, err
	}
	cfg := rec.Config
	// A step already stored (a watcher restarted over the same directory,
	// a crash between storing and queueing) is never overwritten: it is
	// resumed — planned if needed, and only the tiles without a result are
	// queued — or skipped when its result exists.
	var man campaign.Manifest
	var plan campaign.Plan
	var todo []int
	resumed := false
	if b, err := in.Store.Get(ctx, step.Manifest()); err == nil {
		if err := json.Unmarshal(b, &man); err != nil {
			return nil, fmt.Errorf("ingest: %s: %w", step.Manifest(), err)
		}
		if man.Source != req.Path {
			return nil, fmt.Errorf("ingest: %s: step %s of campaign %s already holds %s; give this scan another step name", req.Path, step.Name(), step.Campaign().Name(), man.Source)
		}
		if b, err := in.Store.Get(ctx, campaign.RunResultKey(step, rec.Current)); err == nil && len(b) > 0 {
			return nil, fmt.Errorf("ingest: %s: %w", req.Path, ErrDone)
		}
		if pb, err := in.Store.Get(ctx, campaign.PlanKey(step, rec.Current)); err == nil && json.Unmarshal(pb, &plan) == nil {
			resumed = true
		}
	} else if !errors.Is(err, fs.ErrNotExist) {
		return nil, err
	} else if man, err = in.store(ctx, step, req, cfg); err != nil {
		return nil, err
	}
	if !resumed {
		var err error
		t0 := time.Now()
		if plan, err = PlanStep(ctx, in.Store, man, cfg, in.Workers, in.Version); err != nil {
			return nil, fmt.Errorf("ingest: %s: pass 1: %w", req.Path, err)
		}
		in.stage("pass1", t0)
		log := in.Log
		if log == nil {
			log = slog.Default()
		}
		if r := plan.Registration; r != nil && r.Beyond {
			log.Warn("ingest: registration: the step moved against the reference scan by more than register.max_shift; resampled by it all the same",
				"scan", req.Path, "shift_zyx_voxels", r.Shift, "limit_voxels", r.Limit, "peak", r.Peak)
		}
		if ph := plan.Thresholds.Phases; ph.OneFluid() || ph.Decided == "undecided" {
			log.Warn("ingest: pass 1: fewer phases than configured, or undecided", "scan", req.Path, "phases_detected", ph.InScan(), "fluids", ph.Fluids, "note", ph.Describe())
		}
		plan.Priority = priorityName(req.Priority)
		if err := campaign.PutJSON(ctx, in.Store, campaign.PlanKey(step, plan.ParamHash), plan); err != nil {
			return nil, err
		}
	} else {
		for i := 0; i < plan.Tiles; i++ {
			rk, _ := step.TileResult(i, plan.ParamHash)
			if _, err := in.Store.Get(ctx, rk); err != nil {
				todo = append(todo, i)
			}
		}
		if len(todo) == 0 {
			todo = []int{plan.Tiles - 1} // all stored: one result re-announced completes the step
		}
	}
	labels := step.Labels()
	if plan.ParamHash != rec.Current {
		labels = campaign.RunLabelsKey(step, plan.ParamHash)
	}
	t0 := time.Now()
	if err := PublishTileSet(ctx, in.Queue, man, plan, labels, req.Priority, in.Metrics, todo); err != nil {
		return nil, err
	}
	in.stage("publish", t0)
	ready := &sluicepb.StepReady{Campaign: step.Campaign().Name(), Step: step.Name(), ManifestKey: step.Manifest(),
		TileCount: int32(plan.Tiles), TimeS: man.TimeS, ParamHash: plan.ParamHash, Priority: req.Priority,
		IngestedAt: timestamppb.New(man.IngestedAt)}
	if in.Stepped != nil {
		in.Stepped(ready)
	}
	return ready, nil
}

// stage records the time since t0 as one step's ingest stage.
func (in *Ingester) stage(name string, t0 time.Time) {
	if in.Metrics != nil {
		in.Metrics.StageSeconds.WithLabelValues(name).Observe(time.Since(t0).Seconds())
	}
}

// StoreStep stores one scan as a step (volume.zarr, then the manifest)
// without planning or queueing it: reprocessing an archive plans each step
// under the run's own parameters. The chunking and voxel size follow the
// campaign's current configuration, as for live steps.
func (in *Ingester) StoreStep(ctx context.Context, req Request) (campaign.Manifest, error) {
	step, err := layout.NewStep(req.Campaign, req.Step)
	if err != nil {
		return campaign.Manifest{}, err
	}
	rec, err := campaign.LoadRecord(ctx, in.Store, step.Campaign())
	if err != nil {
		return campaign.Manifest{}, err
	}
	return in.store(ctx, step, req, rec.Config)
}

// MaxChunk is the largest chunk edge of a stored grey volume. A worker
// reads its tile with a halo, and a Zarr reader decodes whole chunks: with
// chunks as large as the tile, the 27 chunks around a 256³ tile are 19×
// the voxels it needs (290³ of 768³); with 64³ chunks they are 2.3×
// (384³). Smaller chunks also shrink ingest's band buffer (chunk² × nx).
const MaxChunk = 64

// badScan is a refusal of a scan for what it lacks (not for a fault of
// its bytes); it counts as a bad scan file (volio.ErrFormat) without
// adding that error's text to the line.
type badScan struct{ msg string }

func (e badScan) Error() string        { return e.msg }
func (e badScan) Is(target error) bool { return target == volio.ErrFormat }

// mtimeOrigin is the campaign's origin of modification-time step times.
type mtimeOrigin struct {
	ModTime time.Time `json:"mtime_origin"`
	File    string    `json:"file"`
}

// stepTime is the experiment time of the scan of req and where it comes
// from: the request's own time (--time, --times, marker), else the scan's
// header, else — only when the request allows it — its modification time
// counted from the campaign's origin. A scan with none is refused.
func (in *Ingester) stepTime(ctx context.Context, c layout.Campaign, req Request, h volio.Header) (float64, string, error) {
	switch {
	case req.HasTime:
		from := req.TimeFrom
		if from == "" {
			from = "given"
		}
		return req.TimeS, from, nil
	case h.HasTime:
		return h.TimeS, "header", nil
	case req.ModTime.IsZero():
		return 0, "", badScan{fmt.Sprintf("ingest: %s has no experiment time: none from its marker (time_s), --times or --time, none in its metadata; give it one, or date scans by file modification time with --time-from-mtime", req.Path)}
	}
	var o mtimeOrigin
	key := c.MTimeOrigin()
	err := campaign.GetJSON(ctx, in.Store, key, &o)
	if errors.Is(err, fs.ErrNotExist) {
		o = mtimeOrigin{ModTime: req.ModTime.UTC(), File: req.Path}
		err = campaign.PutJSON(ctx, in.Store, key, o)
	}
	if err != nil {
		return 0, "", fmt.Errorf("ingest: %s: time origin %s: %w", req.Path, key, err)
	}
	d := req.ModTime.Sub(o.ModTime).Seconds()
	if d < 0 {
		return 0, "", badScan{fmt.Sprintf("ingest: %s was modified at %s, before the campaign's time origin %s (the modification time of %s): give it a time in its marker or --times",
			req.Path, req.ModTime.UTC().Format(time.RFC3339), o.ModTime.Format(time.RFC3339), o.File)}
	}
	return d, "mtime", nil
}

// ChunkEdge returns the chunk edge of grey volumes stored for a tile edge.
func ChunkEdge(tile int) int { return min(tile, MaxChunk) }

// store streams the volume into volume.zarr and writes the manifest.
func (in *Ingester) store(ctx context.Context, step layout.Step, req Request, cfg campaign.Config) (campaign.Manifest, error) {
	received := time.Now().UTC()
	st, err := volio.OpenStream(req.Path, in.ReadOpt)
	if err != nil {
		return campaign.Manifest{}, err
	}
	defer st.Close()
	// Raw files and Zarr arrays are read one row of chunks at a time, so
	// memory follows tile² × nx, not the cross-section; other formats
	// (TIFF slices decode whole) go slab by slab.
	bands, _ := st.(volio.BandReader)
	h := st.Header()
	// The config's voxel size, else the file's. Neither: refuse the scan
	// before anything is stored; a guessed size would scale every area,
	// curvature and Pc of the series.
	vs := h.VoxelSize
	if v := cfg.VoxelSizeM(); v > 0 {
		vs = v
	} else if vs == 0 {
		return campaign.Manifest{}, badScan{fmt.Sprintf("ingest: %s: no voxel size: neither the campaign config (voxel_size, e.g. 2.5um), --voxel-size nor the file's metadata gives one", req.Path)}
	} else if err := campaign.CheckVoxelSize(vs); err != nil {
		return campaign.Manifest{}, badScan{fmt.Sprintf("ingest: %s: voxel size in the file's metadata: %v", req.Path, err)}
	}
	if err := in.checkShape(ctx, step, req.Path, h); err != nil {
		return campaign.Manifest{}, err
	}
	st = finiteSlabs{Stream: st, path: req.Path}
	t, from, err := in.stepTime(ctx, step.Campaign(), req, h)
	if err != nil {
		return campaign.Manifest{}, err
	}
	tile := cfg.Tile
	c := ChunkEdge(tile)
	chunks := [3]int{min(c, h.Shape[0]), min(c, h.Shape[1]), min(c, h.Shape[2])}
	z, err := volio.CreateZarr(ctx, in.Store, strings.TrimSuffix(step.Volume(), "/"), volio.ZarrMeta{
		Shape: h.Shape, Chunks: chunks, DType: h.DType, Compressor: "zstd", VoxelSize: vs, TimeS: t, HasTime: true,
		Attrs: map[string]any{"campaign": step.Campaign().Name(), "step": step.Name()}})
	if err != nil {
		return campaign.Manifest{}, err
	}
	var stored int64
	var reading, writing time.Duration
	total := int64(h.Shape[0])
	rows := h.Shape[1]
	if bands != nil {
		rows = chunks[1]
	}
	var band volume.Any // reused: WriteBox is done with a band before the next is read
	for z0 := 0; z0 < h.Shape[0]; z0 += chunks[0] {
		z1 := min(z0+chunks[0], h.Shape[0])
		for y0 := 0; y0 < h.Shape[1]; y0 += rows {
			if err := ctx.Err(); err != nil {
				return campaign.Manifest{}, err
			}
			y1 := min(y0+rows, h.Shape[1])
			t0 := time.Now()
			var part volume.Any
			if bands != nil {
				if band, err = bands.ReadBandInto(band, z0, z1, y0, y1); err == nil {
					part, err = band, volio.CheckFinite(req.Path, band)
				}
			} else {
				part, err = st.ReadSlab(z0, z1)
			}
			if err != nil {
				return campaign.Manifest{}, err
			}
			t1 := time.Now()
			if err := z.WriteBox(ctx, part); err != nil {
				return campaign.Manifest{}, fmt.Errorf("ingest: %s: storing slices %d–%d, rows %d–%d: %w", req.Path, z0, z1, y0, y1, err)
			}
			reading += t1.Sub(t0)
			writing += time.Since(t1)
			stored += int64(part.Bounds().Voxels() * h.DType.Size())
		}
		if in.Progress != nil {
			in.Progress(int64(z1), total)
		}
	}
	if in.Metrics != nil {
		in.Metrics.BytesWritten.Add(float64(stored))
		in.Metrics.StageSeconds.WithLabelValues("read").Observe(reading.Seconds())
		in.Metrics.StageSeconds.WithLabelValues("zarr_write").Observe(writing.Seconds())
	}
	man := campaign.Manifest{Campaign: step.Campaign().Name(), Step: step.Name(), Shape: h.Shape, DType: h.DType.String(),
		VoxelSize: vs, TimeS: t, TimeFrom: from, Chunk: c, Source: req.Path, Bytes: stored, ReceivedAt: received, IngestedAt: time.Now().UTC(), Version: in.Version}
	return man, campaign.PutJSON(ctx, in.Store, step.Manifest(), man)
}

// ZarrSource reads boxes of a stored array for pass 1 and workers.
func ZarrSource(ctx context.Context, b volio.Bucket, prefix string) (scan.Source, error) {
	z, err := volio.OpenZarr(ctx, b, strings.TrimSuffix(prefix, "/"))
	if err != nil {
		return nil, err
	}
	return func(box volume.Box) (volume.Any, error) { return z.ReadBox(ctx, box) }, nil
}

// PlanStep runs pass 1 of a stored step under cfg and returns its plan.
func PlanStep(ctx context.Context, st Store, man campaign.Manifest, cfg campaign.Config, workers int, version string) (campaign.Plan, error) {
	step, err := layout.NewStep(man.Campaign, man.Step)
	if err != nil {
		return campaign.Plan{}, err
	}
	src, err := ZarrSource(ctx, st, step.Volume())
	if err != nil {
		return campaign.Plan{}, err
	}
	var solid scan.Source
	if cfg.Segment.Reference {
		if solid, err = ZarrSource(ctx, st, step.Campaign().SolidMask()); err != nil {
			return campaign.Plan{}, fmt.Errorf("reference mode needs the solid mask at %s: %w", step.Campaign().SolidMask(), err)
		}
	}
	dt, err := volume.ParseDType(man.DType)
	if err != nil {
		return campaign.Plan{}, err
	}
	var reg *register.Result
	if cfg.Registers() {
		if reg, err = RegisterStep(ctx, st, step, man, cfg); err != nil {
			return campaign.Plan{}, err
		}
		src = scan.Registered(src, man.Whole(), reg.Applied)
		solid = scan.RegisteredMask(solid, man.Whole(), reg.Applied)
	}
	hash := cfg.Hash()
	var prep scan.Prepared
	eff := cfg
	var stored *segment.CampaignThresholds
	if cfg.Segment.ThresholdScope == segment.ScopeCampaign {
		// The campaign's record so far fixes the float32 binning of this
		// step before pass 1 reads it.
		if stored, err = campaignRecord(ctx, st, step, hash); err != nil {
			return campaign.Plan{}, err
		}
		if eff, err = scan.CampaignBinning(cfg, dt, stored, step.Name(), man.TimeS); err != nil {
			key, _ := step.Campaign().Thresholds(hash)
			return campaign.Plan{}, fmt.Errorf("%s: %s: %w", man.Source, key, err)
		}
	}
	if ThresholdsKnown(cfg, dt) {
		// Nothing of pass 1 is used: skip reading and filtering the step.
		prep.Thresholds, err = segment.ComputeThresholds(segment.Hist{}, cfg.Segment)
	} else {
		prep, eff, err = scan.Prepare(src, man.Whole(), dt, eff, solid, workers)
	}
	if err != nil {
		return campaign.Plan{}, err
	}
	if cfg.Segment.ThresholdScope == segment.ScopeCampaign {
		if prep, err = campaignThresholds(ctx, st, step, man.TimeS, hash, prep, eff, stored); err != nil {
			return campaign.Plan{}, err
		}
	}
	halo, err := scan.Halo(eff)
	if err != nil {
		return campaign.Plan{}, err
	}
	p := campaign.Plan{Campaign: man.Campaign, Step: man.Step, ParamHash: hash, Config: eff, Thresholds: prep.Thresholds,
		Tile: cfg.Tile, Halo: halo, Registration: reg, PlannedAt: time.Now().UTC(), Version: version}
	p.Tiles = p.Tiling(man).Len()
	return p, nil
}

// RegisterStep estimates the shift of a stored step against the campaign's
// reference scan (reference/volume.zarr, stored by `sluice reference`) by
// phase correlation over the central region of both (package register),
// once per step and parameter set, and decides it under the campaign's
// limit.
func RegisterStep(ctx context.Context, st Store, step layout.Step, man campaign.Manifest, cfg campaign.Config) (*register.Result, error) {
	refKey := step.Campaign().ReferenceVolume()
	ref, err := ZarrSource(ctx, st, refKey)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return nil, fmt.Errorf("registration needs the reference scan's grey values at %s (`sluice reference` stores them with the solid mask); for a campaign whose reference holds only the mask, set register.off: true", refKey)
		}
		return nil, fmt.Errorf("registration: reference scan %s: %w", refKey, err)
	}
	region, err := register.Region(man.Whole(), cfg.Register.Region)
	if err != nil {
		return nil, err
	}
	rg, err := ref(region)
	if err != nil {
		return nil, fmt.Errorf("registration: reference scan %s: %w", refKey, err)
	}
	src, err := ZarrSource(ctx, st, step.Volume())
	if err != nil {
		return nil, err
	}
	g, err := src(region)
	if err != nil {
		return nil, err
	}
	est, err := register.Phase(rg, g, region)
	if err != nil {
		return nil, err
	}
	r := register.Decide(est, cfg.RegisterLimit())
	return &r, nil
}

// campaignThresholds applies the campaign's thresholds (threshold scope
// "campaign") to a step's pass 1: it reads the campaign record under hash,
// or — when there is none yet and this step holds every phase — stores the
// one this step fixes. Steps of a run are planned in time order (ingest as
// they come, reprocess sorted by time), so the first such step fixes them.
func campaignThresholds(ctx context.Context, st Store, step layout.Step, timeS float64, hash string, prep scan.Prepared, eff campaign.Config, stored *segment.CampaignThresholds) (scan.Prepared, error) {
	key, err := step.Campaign().Thresholds(hash)
	if err != nil {
		return prep, err
	}
	prep, fresh, err := scan.CampaignPrepare(prep, eff, stored, step.Name(), timeS)
	if err != nil {
		if stored != nil {
			return prep, fmt.Errorf("%s: %w", key, err)
		}
		return prep, err
	}
	if fresh != nil {
		if err := campaign.PutJSON(ctx, st, key, fresh); err != nil {
			return prep, err
		}
	}
	return prep, nil
}

// campaignRecord reads the campaign's thresholds record of run hash (nil
// when none is stored yet).
func campaignRecord(ctx context.Context, st Store, step layout.Step, hash string) (*segment.CampaignThresholds, error) {
	key, err := step.Campaign().Thresholds(hash)
	if err != nil {
		return nil, err
	}
	var ct segment.CampaignThresholds
	switch err := campaign.GetJSON(ctx, st, key, &ct); {
	case err == nil:
		return &ct, nil
	case errors.Is(err, fs.ErrNotExist):
		return nil, nil
	default:
		return nil, err
	}
}

// ThresholdsKnown reports whether a step's plan follows from cfg alone,
// before any voxel is read: fixed thresholds, a given (or no) sample
// cylinder, a given grey range for float32 scans, a given solid grey for
// the partial-volume correction and no local-fluid passes (which need the
// fluid peaks of the histogram), and thresholds of scope "step" (scope
// "campaign" follows the drift of each step's histogram). scan.Prepare would then read and filter
// the whole step only to return cfg's own values.
func ThresholdsKnown(cfg campaign.Config, dt volume.DType) bool {
	p := cfg.Segment
	return p.Threshold == "fixed" && p.ThresholdScope != segment.ScopeCampaign &&
		!(cfg.DetectSample && p.Sample.Radius == 0) &&
		!(dt == volume.Float32 && p.Range == [2]float64{}) &&
		!(p.PartialVolume.Blur > 0 && p.PartialVolume.SolidGrey == 0) &&
		p.PartialVolume.LocalFluid == 0
}

// PublishTiles queues one task per tile of a planned step.
func PublishTiles(ctx context.Context, q Publisher, man campaign.Manifest, plan campaign.Plan, labelKey string, prio sluicepb.Priority, m *telemetry.Ingest) error {
	return PublishTileSet(ctx, q, man, plan, labelKey, prio, m, nil)
}

// PublishTileSet queues the tasks of the given tiles of a planned step (all
// tiles when tiles is nil); reprocessing queues only the tiles whose results
// are missing.
func PublishTileSet(ctx context.Context, q Publisher, man campaign.Manifest, plan campaign.Plan, labelKey string, prio sluicepb.Priority, m *telemetry.Ingest, tiles []int) error {
	step, err := layout.NewStep(man.Campaign, man.Step)
	if err != nil {
		return err
	}
	t := plan.Tiling(man)
	if tiles == nil {
		tiles = make([]int, t.Len())
		for i := range tiles {
			tiles[i] = i
		}
	}
	now := timestamppb.Now()
	for _, i := range tiles {
		if i < 0 || i >= t.Len() {
			return fmt.Errorf("ingest: %s/%s: tile %d of %d", man.Campaign, man.Step, i, t.Len())
		}
		core := t.Core(i)
		rk, err := step.TileResult(i, plan.ParamHash)
		if err != nil {
			return err
		}
		task := &sluicepb.TileTask{Campaign: man.Campaign, Step: man.Step, Tile: int32(i), TileCount: int32(t.Len()),
			Core: BoxToProto(core), Halo: int32(plan.Halo), ParamHash: plan.ParamHash, ManifestKey: step.Manifest(),
			InputKey: step.Volume(), LabelKey: labelKey, ResultKey: rk, Priority: prio, TimeS: man.TimeS, PublishedAt: now}
		if err := q.PublishTask(ctx, task); err != nil {
			return fmt.Errorf("ingest: publishing tile %d of %s/%s: %w", i, man.Campaign, man.Step, err)
		}
		if m != nil {
			m.Tasks.WithLabelValues(priorityName(prio)).Inc()
		}
	}
	return nil
}

// BoxToProto converts a box to its message form.
func BoxToProto(b volume.Box) *sluicepb.Box {
	return &sluicepb.Box{MinZ: int64(b.Min[0]), MinY: int64(b.Min[1]), MinX: int64(b.Min[2]),
		MaxZ: int64(b.Max[0]), MaxY: int64(b.Max[1]), MaxX: int64(b.Max[2])}
}

// BoxFromProto converts a message box back.
func BoxFromProto(b *sluicepb.Box) volume.Box {
	if b == nil {
		return volume.Box{}
	}
	return volume.Box{Min: [3]int{int(b.MinZ), int(b.MinY), int(b.MinX)}, Max: [3]int{int(b.MaxZ), int(b.MaxY), int(b.MaxX)}}
}

func priorityName(p sluicepb.Priority) string {
	if p == sluicepb.Priority_PRIORITY_BATCH {
		return "batch"
	}
	return "live"
}
