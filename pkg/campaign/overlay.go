package campaign

import (
	"bytes"
	"encoding/json"
	"fmt"
	"reflect"
	"sort"
	"strings"

	"gopkg.in/yaml.v3"
)

// Set returns c with assignments applied. Each assignment is
// "dotted.key=value": the key names a configuration field by its YAML path
// (segment.threshold, segment.fixed, measure.curvature_exclude, …) and the
// value is a YAML flow value (fixed, 2, [18000, 30000], true). The
// assignments are decoded over c with the same strict decoder as a config
// file, so an unknown key is an error; the result is validated.
func (c Config) Set(assignments []string) (Config, error) {
	if len(assignments) == 0 {
		return c, nil
	}
	doc := map[string]any{}
	for _, a := range assignments {
		key, val, ok := strings.Cut(a, "=")
		key = strings.TrimSpace(key)
		if !ok || key == "" {
			return c, fmt.Errorf("campaign: --set %q: want key=value", a)
		}
		var v any
		if err := yaml.Unmarshal([]byte(val), &v); err != nil {
			return c, fmt.Errorf("campaign: --set %q: value %q: %w", key, val, oneLine(err))
		}
		if err := put(doc, strings.Split(key, "."), v); err != nil {
			return c, fmt.Errorf("campaign: --set %q: %w", key, err)
		}
	}
	b, err := yaml.Marshal(doc)
	if err != nil {
		return c, fmt.Errorf("campaign: --set: %w", err)
	}
	out := c
	out.RigLog = c.RigLog.Clone() // decoded into below: c keeps its own
	if e := unknownKey(b, reflect.TypeOf(c)); e != nil {
		return c, fmt.Errorf("config: --set: %w", e)
	}
	dec := yaml.NewDecoder(bytes.NewReader(b))
	dec.KnownFields(true)
	if err := dec.Decode(&out); err != nil {
		return c, fmt.Errorf("campaign: --set: %w", oneLine(err))
	}
	if err := out.Validate(); err != nil {
		return c, fmt.Errorf("--set: %w", err)
	}
	return out, nil
}

// put stores v at the dotted path in a nested map.
func put(m map[string]any, path []string, v any) error {
	for i, p := range path {
		if p == "" {
			return fmt.Errorf("empty key segment")
		}
		if i == len(path)-1 {
			if _, ok := m[p].(map[string]any); ok {
				return fmt.Errorf("%s is a section, not a value", p)
			}
			m[p] = v
			return nil
		}
		next, ok := m[p].(map[string]any)
		if !ok {
			if _, isVal := m[p]; isVal {
				return fmt.Errorf("%s is set as a value and as a section", p)
			}
			next = map[string]any{}
			m[p] = next
		}
		m = next
	}
	return nil
}

// Diff lists the result-changing values in which b differs from a, as
// "dotted.key: A → B" in key order (tile is left out: it does not change
// results).
func Diff(a, b Config) []string {
	fa, fb := flatten(a), flatten(b)
	keys := map[string]bool{}
	for k := range fa {
		keys[k] = true
	}
	for k := range fb {
		keys[k] = true
	}
	var out []string
	for k := range keys {
		if k == "tile" || fa[k] == fb[k] {
			continue
		}
		va, vb := fa[k], fb[k]
		if va == "" {
			va = "unset"
		}
		if vb == "" {
			vb = "unset"
		}
		out = append(out, k+": "+va+" → "+vb)
	}
	sort.Strings(out)
	return out
}

// flatten maps every leaf of c's JSON form to its compact JSON text.
func flatten(c Config) map[string]string {
	b, _ := json.Marshal(c)
	var v any
	_ = json.Unmarshal(b, &v)
	out := map[string]string{}
	var walk func(prefix string, v any)
	walk = func(prefix string, v any) {
		if m, ok := v.(map[string]any); ok && len(m) > 0 {
			for k, x := range m {
				if prefix != "" {
					k = prefix + "." + k
				}
				walk(k, x)
			}
			return
		}
		t, _ := json.Marshal(v)
		out[prefix] = string(t)
	}
	walk("", v)
	return out
}
