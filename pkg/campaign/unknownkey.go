package campaign

import (
	"fmt"
	"reflect"
	"strconv"
	"strings"

	"gopkg.in/yaml.v3"
)

// unknownKey finds the first key of a YAML document that names no field of
// t and describes it in the words of the config file: its dotted path
// (segment.treshold), its line, and the closest known key when one is near
// enough to be a slip of the keyboard. The strict decoder would say
// "field treshold not found in type segment.Params", naming a Go type the
// user never sees. It returns nil when every key is known or the document
// does not parse (the decoder then reports that).
func unknownKey(data []byte, t reflect.Type) *UnknownKeyError {
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil || len(doc.Content) == 0 {
		return nil
	}
	return walkKeys(doc.Content[0], t, "")
}

// UnknownKeyError is a key of a configuration that names no parameter.
type UnknownKeyError struct {
	Key     string // dotted path: segment.treshold
	Line    int    // 1-based line in the document
	Nearest string // closest known dotted key, or ""
}

func (e *UnknownKeyError) Error() string {
	key := e.Key
	// A key is the user's text: one holding a line break or another
	// control character is quoted, so the message stays one line.
	if strings.IndexFunc(key, func(r rune) bool { return r < 0x20 || r == 0x7f }) >= 0 {
		key = strconv.Quote(key)
	}
	if e.Nearest != "" {
		return fmt.Sprintf("unknown key %s (did you mean %s?)", key, e.Nearest)
	}
	return fmt.Sprintf("unknown key %s", key)
}

func walkKeys(n *yaml.Node, t reflect.Type, prefix string) *UnknownKeyError {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch {
	case n.Kind == yaml.MappingNode && t.Kind() == reflect.Struct:
		fields := yamlFields(t)
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			ft, ok := fields[k.Value]
			if !ok {
				names := make([]string, 0, len(fields))
				for name := range fields {
					names = append(names, name)
				}
				e := &UnknownKeyError{Key: prefix + k.Value, Line: k.Line}
				if near := Nearest(k.Value, names); near != "" {
					e.Nearest = prefix + near
				}
				return e
			}
			if e := walkKeys(v, ft, prefix+k.Value+"."); e != nil {
				return e
			}
		}
	case n.Kind == yaml.SequenceNode && (t.Kind() == reflect.Slice || t.Kind() == reflect.Array):
		for _, c := range n.Content {
			if e := walkKeys(c, t.Elem(), prefix); e != nil {
				return e
			}
		}
	}
	return nil
}

// yamlFields maps the YAML keys of struct type t to their field types, the
// way yaml.v3 names them: the tag's name, else the lower-cased field name;
// ",inline" fields lend their keys to t.
func yamlFields(t reflect.Type) map[string]reflect.Type {
	out := map[string]reflect.Type{}
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		if !f.IsExported() {
			continue
		}
		tag := f.Tag.Get("yaml")
		name, opts, _ := strings.Cut(tag, ",")
		if name == "-" {
			continue
		}
		if strings.Contains(","+opts+",", ",inline,") {
			ft := f.Type
			for ft.Kind() == reflect.Pointer {
				ft = ft.Elem()
			}
			if ft.Kind() == reflect.Struct {
				for k, v := range yamlFields(ft) {
					out[k] = v
				}
			}
			continue
		}
		if name == "" {
			name = strings.ToLower(f.Name)
		}
		out[name] = f.Type
	}
	return out
}

// Nearest returns the candidate nearest to s by edit distance, ignoring
// case, dashes and underscores, when at most a third of the letters (at
// least 1, at most 3) differ; else "". It names the key or flag a user
// most likely meant (config keys here, command-line flags in the CLI).
func Nearest(s string, candidates []string) string {
	norm := strings.NewReplacer("-", "", "_", "")
	key := func(x string) string { return strings.ToLower(norm.Replace(x)) }
	best, bestD := "", 1<<30
	for _, c := range candidates {
		d := EditDistance(key(s), key(c))
		if d < bestD || (d == bestD && c < best) {
			best, bestD = c, d
		}
	}
	limit := min(max(max(len(s), len(best))/3, 1), 3)
	if best == "" || bestD > limit {
		return ""
	}
	return best
}

// EditDistance is the optimal string alignment distance: single-byte
// insertions, deletions, substitutions and adjacent transpositions each
// cost 1.
func EditDistance(a, b string) int {
	d := make([][]int, len(a)+1)
	for i := range d {
		d[i] = make([]int, len(b)+1)
		d[i][0] = i
	}
	for j := range d[0] {
		d[0][j] = j
	}
	for i := 1; i <= len(a); i++ {
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			d[i][j] = min(d[i-1][j]+1, d[i][j-1]+1, d[i-1][j-1]+cost)
			if i > 1 && j > 1 && a[i-1] == b[j-2] && a[i-2] == b[j-1] {
				d[i][j] = min(d[i][j], d[i-2][j-2]+1)
			}
		}
	}
	return d[len(a)][len(b)]
}
