package campaign

import (
	"sluice/pkg/layout"
)

// Keys of run-scoped objects, next to the contract layout of package
// layout. A run is one parameter hash applied to a campaign; the campaign's
// current run also writes the contract paths (steps/<s>/labels.zarr,
// steps/<s>/result.json, series.csv/json), every run writes its own copies
// below runs/<hash>/ so earlier runs are never overwritten.

// PlanKey returns the key of a step's plan under a parameter hash.
func PlanKey(s layout.Step, hash string) string { return s.Dir() + "plans/" + hash + ".json" }

// RunResultKey returns the key of a step's result under a parameter hash.
func RunResultKey(s layout.Step, hash string) string {
	return s.Dir() + "runs/" + hash + "/result.json"
}

// FailureKey returns the key of the record of a step that failed under a
// parameter hash (a tile dead-lettered), written by the aggregator so that
// the failure outlives it.
func FailureKey(s layout.Step, hash string) string {
	return s.Dir() + "runs/" + hash + "/failed.json"
}

// RunLabelsKey returns the label array prefix of a step under a parameter
// hash.
func RunLabelsKey(s layout.Step, hash string) string {
	return s.Dir() + "runs/" + hash + "/labels.zarr/"
}

// RunDir returns the key prefix of a campaign run.
func RunDir(c layout.Campaign, hash string) string { return c.Dir() + "runs/" + hash + "/" }

// RunSeriesKeys returns the series keys of a run: JSON and CSV.
func RunSeriesKeys(c layout.Campaign, hash string) (string, string) {
	d := RunDir(c, hash)
	return d + "series.json", d + "series.csv"
}

// RunConfigKey returns the key of a run's configuration snapshot.
func RunConfigKey(c layout.Campaign, hash string) string { return RunDir(c, hash) + "config.json" }

// EventsKey returns the key of the campaign's detected events.
func EventsKey(c layout.Campaign) string { return c.Dir() + "events.json" }

// Record is campaign.json: the campaign's current configuration and run.
type Record struct {
	Name      string   `json:"name"`
	Current   string   `json:"current_param_hash"`
	Config    Config   `json:"config"`
	Runs      []string `json:"runs"`
	Version   string   `json:"software_version"`
	Scenario  string   `json:"scenario,omitempty"`
	CreatedAt string   `json:"created_at"`
}

// ShapeKey returns the key of the campaign's reference shape
// ({"shape_zyx": [nz, ny, nx]}): written once, by the first step stored, and
// compared with every later step (see ReferenceShape).
func ShapeKey(c layout.Campaign) string { return c.Dir() + "reference-shape.json" }

// ReferenceShape is the content of ShapeKey.
type ReferenceShape struct {
	Shape [3]int `json:"shape_zyx"`
	// From names the scan that fixed it.
	From string `json:"from"`
}

// WaitingKey returns the key of the note that another step waits for this
// step's completion under a parameter hash ({"step": name}): the
// aggregator computes a step's pore-filling events only once the previous
// step's labels are complete, and completes the waiting step when this one
// is done or failed.
func WaitingKey(s layout.Step, hash string) string {
	return s.Dir() + "runs/" + hash + "/waiting.json"
}

// AccuracyKey returns the key of the accuracy estimate of a run (`sluice
// accuracy`: bias and spread of S_w, a_wn, Pc and θ on equilibrium states
// rendered like the campaign's scans and processed with the run's
// parameters): runs/<hash>/accuracy.json.
func AccuracyKey(c layout.Campaign, hash string) string { return RunDir(c, hash) + "accuracy.json" }
