package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"sluice/internal/usermsg"
	"sluice/pkg/campaign"
	"sluice/pkg/layout"
	"sluice/pkg/queue"
)

// runState is one run of a campaign as the store (and the dead letters)
// show it.
type runState struct {
	Hash    string
	Current bool
	// Diff lists the parameters in which the run differs from the current
	// run ("dotted.key: current → run").
	Diff []string
	// Done steps have a run result; Failed ones a dead-lettered tile and no
	// result; Pending ones are planned with tiles missing; Unplanned ones
	// were never queued for this run.
	Done, Pending, Failed, Unplanned []string
	// Reasons maps failed and pending steps to why they are not done.
	Reasons map[string]string
}

// campaignStatus reads every run of a campaign. q may be nil (no NATS
// reachable): failures are then only seen as missing tiles.
func campaignStatus(ctx context.Context, st runStore, q *queue.Queue, name string) (campaign.Record, []string, []runState, error) {
	c, err := layout.NewCampaign(name)
	if err != nil {
		return campaign.Record{}, nil, nil, err
	}
	rec, err := campaign.LoadRecord(ctx, st, c)
	if err != nil {
		return rec, nil, nil, err
	}
	dead := map[string]map[string]string{} // hash → step → reason
	if q != nil {
		dls, err := q.DeadLetters(ctx, name)
		if err != nil {
			return rec, nil, nil, fmt.Errorf("campaign %s: %w", name, err)
		}
		for _, dl := range dls {
			if dl.Task == nil {
				continue
			}
			if dead[dl.Task.ParamHash] == nil {
				dead[dl.Task.ParamHash] = map[string]string{}
			}
			dead[dl.Task.ParamHash][dl.Task.Step] = fmt.Sprintf("tile %d dead-lettered after %d deliveries: %s", dl.Task.Tile, dl.Deliveries, dl.Reason)
		}
	}
	var stepNames []string
	var out []runState
	for i, hash := range rec.Runs {
		steps, err := scanSteps(ctx, st, c, hash)
		if err != nil {
			return rec, nil, nil, err
		}
		if i == 0 {
			for s, sk := range steps {
				if sk.manifest {
					stepNames = append(stepNames, s)
				}
			}
			sort.Strings(stepNames)
		}
		rs := runState{Hash: hash, Current: hash == rec.Current, Reasons: map[string]string{}}
		var cfg campaign.Config
		if err := campaign.GetJSON(ctx, st, campaign.RunConfigKey(c, hash), &cfg); err == nil && !rs.Current {
			rs.Diff = campaign.Diff(rec.Config, cfg)
		}
		for _, s := range stepNames {
			sk := steps[s]
			switch {
			case sk.result:
				rs.Done = append(rs.Done, s)
			case dead[hash][s] != "":
				rs.Failed = append(rs.Failed, s)
				rs.Reasons[s] = dead[hash][s]
			case sk.plan:
				rs.Pending = append(rs.Pending, s)
				step, _ := c.Step(s)
				var plan campaign.Plan
				if err := campaign.GetJSON(ctx, st, campaign.PlanKey(step, hash), &plan); err != nil {
					rs.Reasons[s] = err.Error()
					continue
				}
				var missing []string
				for t := 0; t < plan.Tiles; t++ {
					if !sk.tiles[t] {
						missing = append(missing, fmt.Sprint(t))
					}
				}
				if len(missing) > 8 {
					missing = append(missing[:8], "…")
				}
				if len(missing) == 0 {
					rs.Reasons[s] = fmt.Sprintf("all %d tiles stored, result not written yet", plan.Tiles)
				} else {
					rs.Reasons[s] = fmt.Sprintf("%d of %d tiles stored (missing %s)", len(sk.tiles), plan.Tiles, strings.Join(missing, ", "))
				}
			default:
				rs.Unplanned = append(rs.Unplanned, s)
			}
		}
		out = append(out, rs)
	}
	return rec, stepNames, out, nil
}

// printStatus writes the runs as a short report.
// Scans the watcher gave up follow, each with its reason.
func printStatus(w io.Writer, rec campaign.Record, steps []string, runs []runState, rejected []campaign.Rejection, deadLetters bool) {
	fmt.Fprintf(w, "campaign %s: %d steps, %d runs, %d scans rejected\n", rec.Name, len(steps), len(runs), len(rejected))
	for _, r := range runs {
		mark := ""
		if r.Current {
			mark = " (current)"
		}
		fmt.Fprintf(w, "run %s%-10s done %d  pending %d  failed %d  not queued %d\n", r.Hash, mark, len(r.Done), len(r.Pending), len(r.Failed), len(r.Unplanned))
		for _, d := range r.Diff {
			fmt.Fprintf(w, "    differs: %s\n", d)
		}
		for _, s := range r.Failed {
			fmt.Fprintf(w, "    failed:  step %s: %s\n", s, usermsg.Clean(r.Reasons[s], "", s))
		}
		for i, s := range r.Pending {
			if i == 10 {
				fmt.Fprintf(w, "    pending: … %d more\n", len(r.Pending)-10)
				break
			}
			fmt.Fprintf(w, "    pending: step %s: %s\n", s, usermsg.Clean(r.Reasons[s], "", s))
		}
	}
	for _, r := range rejected {
		fmt.Fprintf(w, "rejected: %s (step %s) after %d attempts at %s: %s\n", r.File, r.Step, r.Attempts, r.At, usermsg.Clean(r.Reason, "", r.File, r.Step))
	}
	if !deadLetters {
		fmt.Fprintln(w, "(no --nats: dead-lettered tiles are not shown, only missing tiles)")
	}
}

// runStatus is `sluice status`.
// isDir reports whether path is an existing directory.
func isDir(path string) bool {
	fi, err := os.Stat(path)
	return err == nil && fi.IsDir()
}

func runStatus(args []string) int {
	fs := flag.NewFlagSet("status", flag.ContinueOnError)
	var nf nodeFlags
	nf.register(fs, withStore|withNATS, "")
	fs.StringVar(&nf.data, "data", defaultData, "data directory whose store/ holds the campaign (when --store is not given)")
	pos, code, ok := parseOrUsage(fs, args)
	if !ok {
		return code
	}
	if len(pos) != 1 {
		return fail(exitBadInput, "status: usage: sluice status CAMPAIGN [--data DIR | --store LOC] [--nats URL]")
	}
	if nf.store == "" {
		// status only reads: a mistyped --data must not become a new,
		// empty store that "has no such campaign".
		if loc := filepath.Join(nf.data, "store"); !isDir(loc) {
			return fail(exitBadInput, "status: no store at %s (use --data or --store)", loc)
		}
	}
	ctx, stop := signalContext()
	defer stop()
	st, err := nf.openStore(ctx)
	if err != nil {
		return fail(exitBadInput, "status: %v", err)
	}
	var q *queue.Queue
	if nf.nats != "" {
		nf.policyRole = queue.PolicyBystander
		if q, _, err = nf.openQueue(ctx, false, logger()); err != nil {
			return fail(exitFailure, "status: %v", err)
		}
		defer q.Close()
	}
	rec, steps, runs, err := campaignStatus(ctx, st, q, pos[0])
	if err != nil {
		return fail(exitFailure, "status: %v", err)
	}
	c, _ := layout.NewCampaign(rec.Name)
	rejected, err := campaign.Rejections(ctx, st, c)
	if err != nil {
		return fail(exitFailure, "status: %v", err)
	}
	printStatus(stdout, rec, steps, runs, rejected, q != nil)
	return exitOK
}
