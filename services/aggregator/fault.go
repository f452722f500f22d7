package aggregator

import (
	"context"

	"sluice/pkg/queue"
	"sluice/pkg/store"
)

// StopOnRefusal returns h with store refusals (store.IsRefused: access
// denied, wrong keys, a full or read-only disk) marked queue.Permanent, so
// that the consumer running it hands the message back and stops, and the
// process exits with that one line. A refused store fails every message
// alike; naking them for ever would only hide the cause. Other errors
// (transient faults, a missing object) are returned as they are and the
// message is retried.
func StopOnRefusal[T any](h func(context.Context, T) error) func(context.Context, T) error {
	return func(ctx context.Context, v T) error {
		err := h(ctx, v)
		if ctx.Err() == nil && store.IsRefused(err) {
			return queue.Permanent(err)
		}
		return err
	}
}
