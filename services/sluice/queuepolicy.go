package main

import (
	"flag"
	"fmt"

	"sluice/pkg/queue"
)

// runQueuePolicy is `sluice queue-policy`: it shows the task delivery
// policy of a deployment's queue and, given --ack-wait and/or
// --max-deliver, replaces it. With an external NATS server this is the one
// place the policy changes after the first process created the task
// consumers; workers and aggregators started with other flags keep the
// policy in force and log the difference.
func runQueuePolicy(args []string) int {
	fs := flag.NewFlagSet("queue-policy", flag.ContinueOnError)
	var nf nodeFlags
	nf.register(fs, withNATS|withPolicy, "")
	if _, code, ok := parseOrUsage(fs, args); !ok {
		return code
	}
	if nf.nats == "" {
		return fail(exitBadInput, "queue-policy: --nats is required (with the embedded server of `sluice run`, its own --ack-wait and --max-deliver are the policy)")
	}
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if nf.ackWait <= 0 || nf.maxDeliver <= 0 {
		return fail(exitBadInput, "queue-policy: --ack-wait %v and --max-deliver %d must be positive", nf.ackWait, nf.maxDeliver)
	}
	ctx, stop := signalContext()
	defer stop()
	nf.policyRole = queue.PolicyBystander
	q, _, err := nf.openQueue(ctx, false, logger())
	if err != nil {
		return fail(exitFailure, "queue-policy: %v", err)
	}
	defer q.Close()
	was := q.Policy()
	if !set["ack-wait"] && !set["max-deliver"] {
		fmt.Fprintf(stdout, "task delivery policy: %v\n", was)
		return exitOK
	}
	p := queue.Policy{AckWait: was.AckWait, MaxDeliver: was.MaxDeliver, BackOff: was.BackOff}
	if set["ack-wait"] {
		p.AckWait, p.BackOff = nf.ackWait, nil
	}
	if set["max-deliver"] {
		p.MaxDeliver = nf.maxDeliver
	}
	if len(p.BackOff) > p.MaxDeliver {
		p.BackOff = nil
	}
	if err := q.SetPolicy(ctx, p); err != nil {
		return fail(exitFailure, "queue-policy: %v", err)
	}
	fmt.Fprintf(stdout, "task delivery policy: was %v, now %v\n", was, q.Policy())
	return exitOK
}
