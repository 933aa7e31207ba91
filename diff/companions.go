package diff

import (
	"bytes"
	"encoding/json"
	"slices"
	"strings"

	"ternkit/pack"
)

// Companion change kinds.
const (
	CompanionAdded   = "added"
	CompanionRemoved = "removed"
	CompanionChanged = "changed"
)

// MaxKeyDiff is the largest JSON companion whose changed keys are listed
// (16 MiB): a larger one is reported changed with its sizes alone, not
// read into memory twice and parsed.
const MaxKeyDiff = 16 << 20

// CompanionChange is a companion file that differs between the artifacts.
type CompanionChange struct {
	Name   string `json:"name"`
	Change string `json:"change"` // added, removed or changed
	BytesA int64  `json:"bytes_a"`
	BytesB int64  `json:"bytes_b"`
	// Keys are, for a changed JSON object file of at most MaxKeyDiff
	// bytes, the keys whose values differ, are added or removed, as dotted
	// paths into nested objects, sorted; empty for other files.
	Keys []string `json:"keys,omitempty"`
}

// compareCompanions lists the companions added, removed or changed (by
// BLAKE3) from a to b, in name order.
func compareCompanions(a, b *pack.Artifact) ([]CompanionChange, error) {
	out := []CompanionChange{}
	mb := b.Manifest()
	for _, ca := range a.Companions() {
		cb := mb.Companion(ca.Name)
		switch {
		case cb == nil:
			out = append(out, CompanionChange{Name: ca.Name, Change: CompanionRemoved, BytesA: ca.Section.Length})
		case cb.Section.BLAKE3 != ca.Section.BLAKE3:
			c := CompanionChange{Name: ca.Name, Change: CompanionChanged, BytesA: ca.Section.Length, BytesB: cb.Section.Length}
			if strings.HasSuffix(ca.Name, ".json") && ca.Section.Length <= MaxKeyDiff && cb.Section.Length <= MaxKeyDiff {
				da, err := a.Companion(ca.Name)
				if err != nil {
					return nil, err
				}
				db, err := b.Companion(ca.Name)
				if err != nil {
					return nil, err
				}
				c.Keys = changedKeys(da, db)
			}
			out = append(out, c)
		}
	}
	ma := a.Manifest()
	for _, cb := range b.Companions() {
		if ma.Companion(cb.Name) == nil {
			out = append(out, CompanionChange{Name: cb.Name, Change: CompanionAdded, BytesB: cb.Section.Length})
		}
	}
	slices.SortStableFunc(out, func(x, y CompanionChange) int { return strings.Compare(x.Name, y.Name) })
	return out, nil
}

// changedKeys are the dotted key paths whose values differ between two
// JSON objects, or nil when either is not a JSON object.
func changedKeys(a, b []byte) []string {
	var oa, ob map[string]json.RawMessage
	if json.Unmarshal(a, &oa) != nil || json.Unmarshal(b, &ob) != nil || oa == nil || ob == nil {
		return nil
	}
	var keys []string
	walkKeys("", oa, ob, &keys)
	slices.Sort(keys)
	return keys
}

func walkKeys(prefix string, a, b map[string]json.RawMessage, keys *[]string) {
	for _, k := range unionKeys(a, b) {
		va, inA := a[k]
		vb, inB := b[k]
		path := prefix + k
		if !inA || !inB {
			*keys = append(*keys, path)
			continue
		}
		var oa, ob map[string]json.RawMessage
		if json.Unmarshal(va, &oa) == nil && json.Unmarshal(vb, &ob) == nil && oa != nil && ob != nil {
			walkKeys(path+".", oa, ob, keys)
			continue
		}
		if !sameJSON(va, vb) {
			*keys = append(*keys, path)
		}
	}
}

// sameJSON compares two JSON values up to whitespace.
func sameJSON(a, b json.RawMessage) bool {
	var ca, cb bytes.Buffer
	if json.Compact(&ca, a) != nil || json.Compact(&cb, b) != nil {
		return bytes.Equal(a, b)
	}
	return bytes.Equal(ca.Bytes(), cb.Bytes())
}
