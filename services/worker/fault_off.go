//go:build !faultinject

package worker

import "sluice/proto/sluicepb"

// fault is the fault-injection point; production builds carry no hook (see
// fault_inject.go, built only with -tags faultinject).
func fault(*sluicepb.TileTask) {}
