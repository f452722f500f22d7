// Package usermsg renders error messages for the people who run sluice:
// one line, without the names of sluice's own Go packages that errors
// collect on their way up ("volio: ", "campaign: ", "store: " …), which
// mean nothing to a scientist and hide the file name that matters.
//
// Only a package name that opens a part of the message (at its start or
// right after ": ") is dropped, and never one that is the whole or part of
// a string the user typed (a file named "store", a campaign named
// "segment"): those are given as keep and stay as they are.
package usermsg

import "strings"

// Packages are the names of sluice's packages (pkg/*, services/*) whose
// error prefixes are dropped. A test keeps the list complete.
var Packages = []string{
	"accuracy", "aggregator", "blockse", "campaign", "cluster", "contact", "curvature", "distance", "equilibrium", "events", "filling", "filter",
	"forward", "ingest", "layout", "levelset", "measure", "mesh", "morph", "phase", "plots",
	"preview", "queue", "register", "report", "riglog", "scan", "scenario", "segment", "series", "store", "synth",
	"telemetry", "tracking", "volio", "volume", "web", "worker",
}

var isPackage = func() map[string]bool {
	m := map[string]bool{}
	for _, p := range Packages {
		m[p] = true
	}
	return m
}()

// Clean returns msg on one line with the package prefixes dropped. lead,
// when msg starts with lead + ": ", is kept (the command's own name, which
// may be spelt like a package: `measure`, `worker`). Occurrences of the
// strings in keep are never touched.
func Clean(msg, lead string, keep ...string) string {
	msg = strings.Join(strings.Fields(msg), " ")
	var b strings.Builder
	start := 0
	if lead != "" && strings.HasPrefix(msg, lead+": ") {
		start = len(lead) + 2
		b.WriteString(msg[:start])
	}
	kept := keptSpans(msg, keep)
	i := start
	for i < len(msg) {
		// i opens a part of the message: drop package prefixes there.
		for {
			w := prefixWord(msg[i:])
			if w == "" || !isPackage[w] || covered(kept, i, i+len(w)) {
				break
			}
			i += len(w) + 2
		}
		j := strings.Index(msg[i:], ": ")
		if j < 0 {
			b.WriteString(msg[i:])
			break
		}
		b.WriteString(msg[i : i+j+2])
		i += j + 2
	}
	return b.String()
}

// prefixWord returns the lower-case word that s starts with when a ": "
// follows it, else "".
func prefixWord(s string) string {
	n := 0
	for n < len(s) && s[n] >= 'a' && s[n] <= 'z' {
		n++
	}
	if n == 0 || !strings.HasPrefix(s[n:], ": ") {
		return ""
	}
	return s[:n]
}

type span struct{ from, to int }

// keptSpans are the byte ranges of msg where a string of keep occurs.
func keptSpans(msg string, keep []string) []span {
	var out []span
	for _, k := range keep {
		if k == "" {
			continue
		}
		for off := 0; ; {
			j := strings.Index(msg[off:], k)
			if j < 0 {
				break
			}
			out = append(out, span{off + j, off + j + len(k)})
			off += j + 1
		}
	}
	return out
}

// covered reports whether [from, to) lies within a kept span.
func covered(kept []span, from, to int) bool {
	for _, s := range kept {
		if s.from <= from && to <= s.to {
			return true
		}
	}
	return false
}
