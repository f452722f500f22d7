package telemetry

import (
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promauto"
)

// Store metrics: object-store faults seen by a process and the retries
// that rode them out.
type Store struct {
	Errors  *prometheus.CounterVec // failed attempts, by operation
	Retries *prometheus.CounterVec // attempts repeated after a failure, by operation
	GaveUp  *prometheus.CounterVec // operations failed for good (permanent error or budget spent), by operation
}

// StoreOps are the operation labels of the store metrics.
var StoreOps = []string{"get", "put", "list", "delete", "stat"}

// NewStore registers the store metrics on reg.
func NewStore(reg prometheus.Registerer) *Store {
	f := promauto.With(reg)
	s := &Store{
		Errors: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_store_errors_total",
			Help: "Object-store operations that failed (each failed attempt), by operation."}, []string{"op"}),
		Retries: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_store_retries_total",
			Help: "Object-store operations attempted again after a failure, by operation."}, []string{"op"}),
		GaveUp: f.NewCounterVec(prometheus.CounterOpts{Name: "sluice_store_gave_up_total",
			Help: "Object-store operations that failed for good (a permanent error, or still failing when the retry budget ran out), by operation."}, []string{"op"}),
	}
	for _, op := range StoreOps {
		s.Errors.WithLabelValues(op)
		s.Retries.WithLabelValues(op)
		s.GaveUp.WithLabelValues(op)
	}
	return s
}

// Observe records one failed attempt (use as store.Retrying.OnError).
func (s *Store) Observe(op string, _ error, retrying bool) {
	s.Errors.WithLabelValues(op).Inc()
	if retrying {
		s.Retries.WithLabelValues(op).Inc()
	} else {
		s.GaveUp.WithLabelValues(op).Inc()
	}
}
