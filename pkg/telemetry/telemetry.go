// Package telemetry holds the Prometheus metrics of the sluice services: one
// struct per component, registered on a registry the caller injects
// (client_golang promauto.With). Domain packages never import it.
//
// Every name here is queried by deploy/grafana/sluice-dashboard.json; the
// dashboard test fails when one is missing from a live /metrics.
package telemetry

import (
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"
)

// Worker metrics.
type Worker struct {
	TilesProcessed   *prometheus.CounterVec   // by priority (live, batch)
	TilesFailed      *prometheus.CounterVec   // by reason
	TilesRedelivered prometheus.Counter       // tasks seen more than once
	TilesDeadLetter  prometheus.Counter       // tasks that exhausted their retries
	StageSeconds     *prometheus.HistogramVec // by stage (Stages)
	BytesRead        prometheus.Counter
	BytesWritten     prometheus.Counter
	Busy             prometheus.Gauge // tiles in flight
}

// NewWorker registers the worker metrics on reg.
func NewWorker(reg prometheus.Registerer) *Worker {
	f := promauto.With(reg)
	w := &Worker{
		TilesProcessed: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_tiles_processed_total",
			Help: "Tiles segmented and measured, by queue priority."}, []string{"priority"}),
		TilesFailed: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_tiles_failed_total",
			Help: "Tile attempts that failed, by reason."}, []string{"reason"}),
		TilesRedelivered: f.NewCounter(prometheus.CounterOpts{Name: "sluice_tiles_redelivered_total",
			Help: "Tile tasks received again after an earlier delivery was not acknowledged."}),
		TilesDeadLetter: f.NewCounter(prometheus.CounterOpts{Name: "sluice_tiles_dead_letter_total",
			Help: "Tile tasks given up after exhausting their retries."}),
		StageSeconds: f.NewHistogramVec(prometheus.HistogramOpts{Name: "sluice_tile_stage_duration_seconds",
			Help:    "Time per tile and stage.",
			Buckets: prometheus.ExponentialBuckets(0.005, 2, 14)}, []string{"stage"}),
		BytesRead: f.NewCounter(prometheus.CounterOpts{Name: "sluice_worker_read_bytes_total",
			Help: "Bytes read from the object store by workers."}),
		BytesWritten: f.NewCounter(prometheus.CounterOpts{Name: "sluice_worker_written_bytes_total",
			Help: "Bytes written to the object store by workers."}),
		Busy: f.NewGauge(prometheus.GaugeOpts{Name: "sluice_worker_tiles_in_flight",
			Help: "Tiles being processed right now."}),
	}
	// Export every series from the start, so dashboards and alerts see
	// zeros rather than nothing.
	for _, p := range []string{"live", "batch"} {
		w.TilesProcessed.WithLabelValues(p)
	}
	for _, r := range FailureReasons {
		w.TilesFailed.WithLabelValues(r)
	}
	for _, s := range Stages {
		w.StageSeconds.WithLabelValues(s)
	}
	return w
}

// FailureReasons label sluice_tiles_failed_total: the tile could not be
// processed, or its result could not be published.
var FailureReasons = []string{"process", "publish"}

// Stages label sluice_tile_stage_duration_seconds: queue_wait is the time
// from publication of the task to the start of its processing (the last
// attempt's wait for a redelivered task), read the grey tile plus halo,
// segment_measure the computation, write the label chunk and result.
var Stages = []string{"queue_wait", "read", "segment_measure", "write"}

// IngestStages label sluice_ingest_stage_duration_seconds: read the scan
// file (decode included), zarr_write the chunk encoding and store writes,
// pass1 the histogram pass and thresholds (zero when the thresholds are
// known before the scan), publish the tile tasks.
var IngestStages = []string{"read", "zarr_write", "pass1", "publish"}

// Ingest metrics.
type Ingest struct {
	Steps        prometheus.Counter
	Rejected     prometheus.Counter
	BytesWritten prometheus.Counter
	Seconds      prometheus.Histogram
	Tasks        *prometheus.CounterVec   // by priority
	StageSeconds *prometheus.HistogramVec // per step and stage (IngestStages)
}

// NewIngest registers the ingest metrics on reg.
func NewIngest(reg prometheus.Registerer) *Ingest {
	f := promauto.With(reg)
	in := &Ingest{
		Steps: f.NewCounter(prometheus.CounterOpts{Name: "sluice_steps_ingested_total",
			Help: "Steps stored and queued."}),
		Rejected: f.NewCounter(prometheus.CounterOpts{Name: "sluice_steps_rejected_total",
			Help: "Scans given up (bad header, truncated, wrong shape …), each counted once however often it was tried."}),
		BytesWritten: f.NewCounter(prometheus.CounterOpts{Name: "sluice_ingest_written_bytes_total",
			Help: "Compressed bytes written by ingest."}),
		Seconds: f.NewHistogram(prometheus.HistogramOpts{Name: "sluice_ingest_duration_seconds",
			Help: "Time to store one step and queue its tiles.", Buckets: prometheus.ExponentialBuckets(0.05, 2, 12)}),
		Tasks: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_tasks_published_total",
			Help: "Tile tasks published, by priority."}, []string{"priority"}),
		StageSeconds: f.NewHistogramVec(prometheus.HistogramOpts{Name: "sluice_ingest_stage_duration_seconds",
			Help:    "Time per step and ingest stage.",
			Buckets: prometheus.ExponentialBuckets(0.01, 2, 14)}, []string{"stage"}),
	}
	for _, s := range IngestStages {
		in.StageSeconds.WithLabelValues(s)
	}
	in.Tasks.WithLabelValues("live")
	in.Tasks.WithLabelValues("batch")
	return in
}

// Aggregator metrics, including the science gauges of the latest step per
// campaign.
type Aggregator struct {
	StepsCompleted *prometheus.CounterVec // by campaign
	StepsFailed    *prometheus.CounterVec // by campaign
	StepLatency    prometheus.Histogram   // ingest → series row
	TilesReceived  prometheus.Counter
	QueueLag       *prometheus.GaugeVec // pending tile tasks by priority
	Events         *prometheus.CounterVec

	SaturationNonwetting *prometheus.GaugeVec
	SaturationWetting    *prometheus.GaugeVec
	CapillaryPressure    *prometheus.GaugeVec
	Curvature            *prometheus.GaugeVec
	ContactAngleMean     *prometheus.GaugeVec
	SpecificAreaWN       *prometheus.GaugeVec
	GangliaCount         *prometheus.GaugeVec
	LargestFraction      *prometheus.GaugeVec
	Breakthrough         *prometheus.GaugeVec
	SteadyState          *prometheus.GaugeVec
	LatestStepTime       *prometheus.GaugeVec
}

// NewAggregator registers the aggregator metrics on reg.
func NewAggregator(reg prometheus.Registerer) *Aggregator {
	f := promauto.With(reg)
	g := func(name, help string) *prometheus.GaugeVec {
		return f.NewGaugeVec(prometheus.GaugeOpts{Name: name, Help: help}, []string{"campaign"})
	}
	a := &Aggregator{
		StepsCompleted: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_steps_completed_total",
			Help: "Steps stitched and appended to their series."}, []string{"campaign"}),
		StepsFailed: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_steps_failed_total",
			Help: "Steps that could not be completed (a tile exhausted its retries)."}, []string{"campaign"}),
		StepLatency: f.NewHistogram(prometheus.HistogramOpts{Name: "sluice_step_latency_seconds",
			Help:    "Time from a step's ingest to its series row.",
			Buckets: prometheus.ExponentialBuckets(0.25, 2, 14)}),
		TilesReceived: f.NewCounter(prometheus.CounterOpts{Name: "sluice_tile_results_received_total",
			Help: "Tile results received by the aggregator (redeliveries included)."}),
		QueueLag: f.NewGaugeVec(prometheus.GaugeOpts{Name: "sluice_queue_lag_tasks",
			Help: "Tile tasks waiting in the queue, by priority."}, []string{"priority"}),
		Events: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_events_total",
			Help: "Experiment events detected (breakthrough, steady_state)."}, []string{"campaign", "kind"}),
		SaturationNonwetting: g("sluice_saturation_nonwetting", "Nonwetting saturation of the latest step."),
		SaturationWetting:    g("sluice_saturation_wetting", "Wetting saturation of the latest step."),
		CapillaryPressure:    g("sluice_capillary_pressure_pascals", "Capillary pressure σκ (area-weighted mean κ) of the latest step."),
		Curvature:            g("sluice_curvature_wn_per_metre", "Area-weighted mean total curvature of the w–n interface, latest step."),
		ContactAngleMean:     g("sluice_contact_angle_mean_degrees", "Mean contact angle through the wetting phase, latest step."),
		SpecificAreaWN:       g("sluice_specific_area_wn_per_metre", "Specific w–n interfacial area of the latest step."),
		GangliaCount:         g("sluice_ganglia_count", "Nonwetting clusters in the latest step."),
		LargestFraction:      g("sluice_ganglion_largest_fraction", "Largest nonwetting cluster as a fraction of the phase, latest step."),
		Breakthrough:         g("sluice_breakthrough", "1 once the nonwetting phase has percolated inlet to outlet."),
		SteadyState:          g("sluice_steady_state", "1 while saturation and Pc are steady within tolerance."),
		LatestStepTime:       g("sluice_latest_step_time_seconds", "Experiment time of the latest completed step."),
	}
	a.QueueLag.WithLabelValues("live")
	a.QueueLag.WithLabelValues("batch")
	return a
}

// Campaign exports a campaign's counters at zero, so that rates and alerts
// work before the first failure or event.
func (a *Aggregator) Campaign(name string) {
	a.StepsCompleted.WithLabelValues(name)
	a.StepsFailed.WithLabelValues(name)
	a.Events.WithLabelValues(name, "breakthrough")
	a.Events.WithLabelValues(name, "steady_state")
	a.Breakthrough.WithLabelValues(name)
	a.SteadyState.WithLabelValues(name)
}
