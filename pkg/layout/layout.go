// Package layout names every object sluice keeps in object storage, in one
// place, following the storage layout of the design (architecture.md):
//
//	campaigns/<campaign>/campaign.json               config snapshot, parameter hash
//	campaigns/<campaign>/reference/…                 optional reference scan and solid mask
//	campaigns/<campaign>/steps/<step>/volume.zarr/   grey values, Zarr v2, "/" separator
//	campaigns/<campaign>/steps/<step>/labels.zarr/   phases, uint8
//	campaigns/<campaign>/steps/<step>/manifest.json  shape, dtype, voxel size, time, tiles
//	campaigns/<campaign>/steps/<step>/result.json    stitched step result
//	campaigns/<campaign>/steps/<step>/tiles/<hash>/<tile>.json  one tile's partial result
//	campaigns/<campaign>/series.csv, series.json     one row per step
//	campaigns/<campaign>/mtime-origin.json           origin of step times from file modification times
//
// Keys are relative to the root of a store; a store opened on
// s3://bucket/prefix or a directory adds its own prefix, so the layout itself
// has none. Campaign and step names match [a-z0-9][a-z0-9._-]{0,63}: they can
// never be "." or "..", never hold a slash and never start with a dot, so a
// key built here cannot climb out of its campaign. Constructors validate once;
// the methods of a valid Campaign or Step cannot fail.
package layout

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// Root is the first segment of every campaign key.
const Root = "campaigns"

// MaxNameLen is the longest campaign or step name.
const MaxNameLen = 64

// ErrName is wrapped by every name validation error.
var ErrName = errors.New("invalid name")

// ValidName reports whether s is a valid campaign or step name:
// [a-z0-9][a-z0-9._-]{0,63}.
func ValidName(s string) bool {
	if len(s) == 0 || len(s) > MaxNameLen {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c >= 'a' && c <= 'z', c >= '0' && c <= '9':
		case i > 0 && (c == '.' || c == '_' || c == '-'):
		default:
			return false
		}
	}
	return true
}

// CheckName returns a one-line error naming what (e.g. "campaign") and the
// offending value when s is not a valid name.
func CheckName(what, s string) error {
	if ValidName(s) {
		return nil
	}
	return fmt.Errorf("layout: %s name %q: %w (want [a-z0-9][a-z0-9._-]{0,63})", what, s, ErrName)
}

// ValidParamHash reports whether h is a usable parameter hash: 1–64 lower-case
// hexadecimal or [a-z0-9] characters. The hash is part of keys and message ids.
func ValidParamHash(h string) bool {
	if len(h) == 0 || len(h) > 64 {
		return false
	}
	for i := 0; i < len(h); i++ {
		c := h[i]
		if !(c >= 'a' && c <= 'z' || c >= '0' && c <= '9') {
			return false
		}
	}
	return true
}

// Campaign is a validated campaign name with the keys that belong to it.
type Campaign struct{ name string }

// NewCampaign validates name and returns its Campaign.
func NewCampaign(name string) (Campaign, error) {
	if err := CheckName("campaign", name); err != nil {
		return Campaign{}, err
	}
	return Campaign{name}, nil
}

// Name returns the campaign name.
func (c Campaign) Name() string { return c.name }

// Dir returns the key prefix of everything in the campaign, with a trailing slash.
func (c Campaign) Dir() string { return Root + "/" + c.name + "/" }

// Config returns the key of the campaign's config snapshot.
func (c Campaign) Config() string { return c.Dir() + "campaign.json" }

// Reference returns the key prefix (trailing slash) of the optional reference scan.
func (c Campaign) Reference() string { return c.Dir() + "reference/" }

// ReferenceVolume returns the Zarr array prefix of the reference scan.
func (c Campaign) ReferenceVolume() string { return c.Reference() + "volume.zarr/" }

// SolidMask returns the Zarr array prefix of the reference solid mask.
func (c Campaign) SolidMask() string { return c.Reference() + "solid.zarr/" }

// MTimeOrigin is where the campaign keeps the origin of step times taken
// from file modification times (--time-from-mtime).
func (c Campaign) MTimeOrigin() string { return c.Dir() + "mtime-origin.json" }

// Thresholds returns the key of the campaign thresholds (threshold scope
// "campaign") under a parameter hash: runs/<hash>/thresholds.json, fixed
// once per run by the first step that holds every phase (or from the
// user's values) and read by every later step's pass 1.
func (c Campaign) Thresholds(paramHash string) (string, error) {
	if !ValidParamHash(paramHash) {
		return "", fmt.Errorf("layout: parameter hash %q: want 1-64 characters [a-z0-9]", paramHash)
	}
	return c.Dir() + "runs/" + paramHash + "/thresholds.json", nil
}

// SeriesCSV returns the key of the campaign's series table.
func (c Campaign) SeriesCSV() string { return c.Dir() + "series.csv" }

// SeriesJSON returns the key of the campaign's series as JSON.
func (c Campaign) SeriesJSON() string { return c.Dir() + "series.json" }

// Steps returns the key prefix under which all steps live (trailing slash).
func (c Campaign) Steps() string { return c.Dir() + "steps/" }

// Step validates a step name and returns the step of this campaign.
func (c Campaign) Step(name string) (Step, error) {
	if c.name == "" {
		return Step{}, errors.New("layout: step of a zero Campaign")
	}
	if err := CheckName("step", name); err != nil {
		return Step{}, err
	}
	return Step{c, name}, nil
}

// Step is a validated (campaign, step) pair with the keys that belong to it.
type Step struct {
	campaign Campaign
	name     string
}

// NewStep validates both names and returns the step.
func NewStep(campaign, step string) (Step, error) {
	c, err := NewCampaign(campaign)
	if err != nil {
		return Step{}, err
	}
	return c.Step(step)
}

// Campaign returns the campaign of the step.
func (s Step) Campaign() Campaign { return s.campaign }

// Name returns the step name.
func (s Step) Name() string { return s.name }

// Dir returns the key prefix of the step, with a trailing slash.
func (s Step) Dir() string { return s.campaign.Steps() + s.name + "/" }

// Volume returns the Zarr v2 array prefix of the grey values (trailing slash):
// ".zarray" and chunk keys "<iz>/<iy>/<ix>" go below it.
func (s Step) Volume() string { return s.Dir() + "volume.zarr/" }

// Labels returns the Zarr v2 array prefix of the phase labels (trailing slash).
func (s Step) Labels() string { return s.Dir() + "labels.zarr/" }

// Manifest returns the key of the step manifest.
func (s Step) Manifest() string { return s.Dir() + "manifest.json" }

// Result returns the key of the stitched step result.
func (s Step) Result() string { return s.Dir() + "result.json" }

// Tiles returns the key prefix of the tile results computed with the given
// parameter hash (trailing slash).
func (s Step) Tiles(paramHash string) (string, error) {
	if !ValidParamHash(paramHash) {
		return "", fmt.Errorf("layout: parameter hash %q: want 1-64 characters [a-z0-9]", paramHash)
	}
	return s.Dir() + "tiles/" + paramHash + "/", nil
}

// TileResult returns the key of one tile's partial result. The key depends
// only on (campaign, step, tile, parameter hash), the same tuple as the task's
// message id, so a redelivered tile overwrites its result instead of adding a
// second one.
func (s Step) TileResult(tile int, paramHash string) (string, error) {
	if tile < 0 {
		return "", fmt.Errorf("layout: tile index %d is negative", tile)
	}
	p, err := s.Tiles(paramHash)
	if err != nil {
		return "", err
	}
	return p + strconv.Itoa(tile) + ".json", nil
}

// TileID returns "campaign/step/tile/paramHash", the identity of one unit of
// work: the queue's message id for deduplication and the key of its result.
func (s Step) TileID(tile int, paramHash string) string {
	return s.campaign.name + "/" + s.name + "/" + strconv.Itoa(tile) + "/" + paramHash
}

// ParseKey splits a key of this layout into its campaign and step names; step
// is empty for keys directly under the campaign. ok is false for keys outside
// the layout or with invalid names.
func ParseKey(key string) (campaign, step string, ok bool) {
	rest, found := strings.CutPrefix(key, Root+"/")
	if !found {
		return "", "", false
	}
	campaign, rest, _ = strings.Cut(rest, "/")
	if !ValidName(campaign) {
		return "", "", false
	}
	rest, found = strings.CutPrefix(rest, "steps/")
	if !found {
		return campaign, "", true
	}
	step, _, _ = strings.Cut(rest, "/")
	if !ValidName(step) {
		return "", "", false
	}
	return campaign, step, true
}
