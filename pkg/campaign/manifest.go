package campaign

import (
	"time"

	"sluice/pkg/register"
	"sluice/pkg/segment"
	"sluice/pkg/volume"
)

// Manifest describes one ingested step: what the grey volume is and where
// it came from. It is written once by ingest, after the volume's chunks are
// durable (steps/<step>/manifest.json).
type Manifest struct {
	Campaign  string  `json:"campaign"`
	Step      string  `json:"step"`
	Shape     [3]int  `json:"shape_zyx"`
	DType     string  `json:"dtype"`
	VoxelSize float64 `json:"voxel_size_m"`
	TimeS     float64 `json:"time_s"`
	// TimeFrom says where TimeS comes from: "--time", "--times",
	// "marker", "header" or "mtime" (file modification time, counted from
	// the campaign's origin; only on request). Empty in older manifests.
	TimeFrom string `json:"time_from,omitempty"`
	Chunk    int    `json:"chunk"`
	Source   string `json:"source"`
	Bytes    int64  `json:"stored_bytes"`
	// ReceivedAt is when ingest started on the scan; IngestedAt when its
	// chunks and this manifest were durable. Step latency runs from
	// ReceivedAt to the series row.
	ReceivedAt time.Time `json:"received_at"`
	IngestedAt time.Time `json:"ingested_at"`
	Version    string    `json:"software_version"`
}

// Whole returns the box of the step's scan.
func (m Manifest) Whole() volume.Box { return volume.BoxOf(m.Shape[0], m.Shape[1], m.Shape[2]) }

// Plan is how one step is processed under one parameter set: the effective
// configuration (with the measured float range and detected sample filled
// in), the step thresholds from pass 1 and the tiling. It lives at
// steps/<step>/plans/<hash>.json; a step can have plans for several
// parameter hashes, so runs stay comparable.
type Plan struct {
	Campaign   string             `json:"campaign"`
	Step       string             `json:"step"`
	ParamHash  string             `json:"param_hash"`
	Config     Config             `json:"config"`
	Thresholds segment.Thresholds `json:"thresholds"`
	// Tile is the tile edge; Tiles the number of tiles; Halo the grey halo
	// workers read around each core.
	Tile  int `json:"tile"`
	Tiles int `json:"tiles"`
	Halo  int `json:"halo"`
	// Registration is the step's drift registration to the reference
	// scan (Config.Registers; nil otherwise): pass 1 and every tile read
	// the step resampled onto the reference grid by Registration.Applied.
	Registration *register.Result `json:"registration,omitempty"`
	Priority     string           `json:"priority"`
	PlannedAt    time.Time        `json:"planned_at"`
	Version      string           `json:"software_version"`
}

// Tiling returns the tiling of the plan over the manifest's scan.
func (p Plan) Tiling(m Manifest) volume.Tiling {
	return volume.Tiling{Whole: m.Whole(), Tile: [3]int{p.Tile, p.Tile, p.Tile}}
}
