package campaign

import (
	"context"
	"fmt"
	"io/fs"
	"strings"
	"sync"
	"testing"

	"sluice/pkg/layout"
	"sluice/pkg/series"
)

const rigYAML = `voxel_size: 4um
ift_n_per_m: 0.035
rig_log:
  columns:
    time: {column: elapsed_s, unit: min}
    rate: {column: q, unit: ml/min}
    differential_pressure: {column: dp, unit: kPa}
  clock_offset_s: -30
  interpolation: previous
  viscosity_pa_s: 1.0e-3
`

// TestRigLogConfig: the rig_log section is read strictly (a misspelt key
// or an unknown unit is refused in one line naming it), changes the
// parameter hash, and a configuration without it keeps the hash it had.
func TestRigLogConfig(t *testing.T) {
	c, err := Parse("camp.yaml", []byte(rigYAML))
	if err != nil {
		t.Fatal(err)
	}
	r := c.RigLog
	if r == nil || r.Columns.Time.Unit != "min" || r.Columns.Rate == nil || r.Columns.Rate.Column != "q" || r.ClockOffsetS != -30 || r.Interpolation != "previous" {
		t.Fatalf("rig_log read as %+v", r)
	}
	without := c
	without.RigLog = nil
	if c.Hash() == without.Hash() {
		t.Error("rig_log does not change the parameter hash")
	}
	plain, err := Parse("plain.yaml", []byte("voxel_size: 4um\nift_n_per_m: 0.035\n"))
	if err != nil {
		t.Fatal(err)
	}
	if plain.Hash() != without.Hash() {
		t.Error("a configuration without rig_log changed its hash")
	}
	// --set decodes into a copy: the configuration it started from keeps
	// its rig_log.
	set, err := c.Set([]string{"rig_log.clock_offset_s=-45", "rig_log.columns.rate.unit=ul/min"})
	if err != nil {
		t.Fatal(err)
	}
	if set.RigLog.ClockOffsetS != -45 || set.RigLog.Columns.Rate.Unit != "ul/min" || c.RigLog.ClockOffsetS != -30 || c.RigLog.Columns.Rate.Unit != "ml/min" {
		t.Errorf("--set: new %+v, original %+v", set.RigLog, c.RigLog)
	}
	if set.Hash() == c.Hash() {
		t.Error("--set of the clock offset kept the hash")
	}
	for _, bad := range []struct{ edit, want string }{
		{strings.Replace(rigYAML, "clock_offset_s", "clock_ofset_s", 1), "line 8: unknown key rig_log.clock_ofset_s"},
		{strings.Replace(rigYAML, "unit: kPa", "unit: kpa", 1), `rig_log.columns.differential_pressure: unknown unit "kpa"`},
		{strings.Replace(rigYAML, "interpolation: previous", "interpolation: cubic", 1), `rig_log.interpolation "cubic"`},
		{strings.Replace(rigYAML, "viscosity_pa_s: 1.0e-3", "viscosity_pa_s: 1001.6", 1), "viscosity_pa_s 1001.6 Pa·s is not plausible"},
		{strings.Replace(rigYAML, "    rate: {column: q, unit: ml/min}\n", "", 1), "map injected_volume or rate"},
	} {
		_, err := Parse("camp.yaml", []byte(bad.edit))
		if err == nil || !strings.Contains(err.Error(), bad.want) || !strings.Contains(err.Error(), "camp.yaml") || strings.Contains(err.Error(), "\n") {
			t.Errorf("want a one-line refusal naming camp.yaml with %q, got %v", bad.want, err)
		}
	}
}

// memStore is an object store in memory.
type memStore struct {
	mu sync.Mutex
	m  map[string][]byte
}

func (s *memStore) Get(_ context.Context, k string) ([]byte, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	b, ok := s.m[k]
	if !ok {
		return nil, fmt.Errorf("%s: %w", k, fs.ErrNotExist)
	}
	return b, nil
}

func (s *memStore) Put(_ context.Context, k string, b []byte) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.m == nil {
		s.m = map[string][]byte{}
	}
	s.m[k] = append([]byte(nil), b...)
	return nil
}

// TestStoreRigLog: a log that reads right is stored verbatim with its
// source and applied to rows; a refused log is not stored and the stored
// one stays; without a rig_log section the columns are cleared.
func TestStoreRigLog(t *testing.T) {
	ctx := context.Background()
	c, _ := Parse("camp.yaml", []byte(rigYAML))
	camp, _ := layout.NewCampaign("rig")
	st := &memStore{}
	good := "elapsed_s,q,dp\n0,1.2,1\n1,1.2,2\n2,1.2,3\n"
	if _, err := StoreRigLog(ctx, st, camp, "/data/rig.csv", []byte(good), *c.RigLog); err != nil {
		t.Fatal(err)
	}
	if _, err := StoreRigLog(ctx, st, camp, "/data/rig.csv", []byte(good+"3,1.2,x\n"), *c.RigLog); err == nil ||
		!strings.Contains(err.Error(), "/data/rig.csv line 5") {
		t.Errorf("bad row: %v", err)
	}
	if b, _ := st.Get(ctx, RigLogKey(camp)); string(b) != good {
		t.Errorf("stored %q, want the good log", b)
	}
	// Step at 60 s on the scans' clock = 1.5 min on the rig's (offset
	// −30 s); previous value: the record at 1 min, dp 2 kPa.
	rows := []series.Row{{Step: "s1", Time: 60}}
	if err := ApplyRigLog(ctx, st, camp, c.RigLog, rows); err != nil {
		t.Fatal(err)
	}
	if p := rows[0].RigDiffPressure; p == nil || *p != 2000 {
		t.Errorf("dp at 60 s = %v, want 2000 Pa", p)
	}
	if err := ApplyRigLog(ctx, st, camp, nil, rows); err != nil || rows[0].RigDiffPressure != nil {
		t.Errorf("without rig_log: %v, dp %v", err, rows[0].RigDiffPressure)
	}
	l, err := LoadRigLog(ctx, st, camp, *c.RigLog)
	if err != nil || l.Source != "/data/rig.csv" || l.Len() != 3 {
		t.Errorf("loaded %+v, %v", l, err)
	}
}
