package report

import (
	"strings"
	"testing"

	"sluice/pkg/events"
)

// TestRegistrationInReport: a series whose steps carry a registration
// shift gets the registration figure, and a step beyond the limit its
// registration_shift event in the events table; a series without has
// neither.
func TestRegistrationInReport(t *testing.T) {
	rows := campaign(4)
	page := string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 4e-6}, Rows: rows}))
	if strings.Contains(page, `id="fig-registration"`) {
		t.Fatal("registration figure in the report of a series without registration")
	}
	for i := range rows {
		d := 0.5 * float64(i)
		rows[i].RegZ, rows[i].RegY, rows[i].RegX = fp(d), fp(-d), fp(0)
		rows[i].RegZM, rows[i].RegYM, rows[i].RegXM = fp(d*4e-6), fp(-d*4e-6), fp(0)
		b := i == 3
		rows[i].RegBeyond = &b
	}
	evs, err := events.Detect(rows, events.Defaults())
	if err != nil {
		t.Fatal(err)
	}
	page = string(render(t, Input{Params: Params{Campaign: "c", VoxelSize: 4e-6}, Rows: rows, Events: evs}))
	if strings.Count(page, `id="fig-registration"`) != 1 {
		t.Error("registration figure not embedded once")
	}
	if !strings.Contains(page, `data-event="registration_shift/`+rows[3].Step+`"`) {
		t.Error("no registration_shift event row for the step beyond the limit")
	}
}
