package verify

import (
	"fmt"
	"maps"
	"path/filepath"
	"slices"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// CheckManifestField compares a manifest field that follows from the
// source (a tensor's name, shape, source dtype and action, the tensor
// order, the source's metadata and file names) with what pack writes from
// that source under the recorded policy.
const CheckManifestField = "manifest_field"

// checkDerived ties each manifest field the source decides to what pack
// would write from it with the recorded policy: one failed check per
// differing field, naming tensor and field, else one passing check per
// tensor. It returns the tensors whose entry differs, whose sections are
// then not decoded by the manifest's claims.
func checkDerived(rep *Report, m *manifest.Manifest, src *convert.Source) map[string]bool {
	bad := map[string]bool{}
	fail := func(tensor, field, format string, args ...any) {
		rep.add(CheckManifestField, tensor, false, "%s: %s", field, fmt.Sprintf(format, args...))
		if tensor != "" {
			bad[tensor] = true
		}
	}
	var policy *convert.Policy
	switch p, err := convert.ParseDescribedPolicy(m.Policy); {
	case m.Policy == nil:
		fail("", "policy", "the manifest records no policy, so the tensors' actions cannot be tied to the source")
	case err != nil:
		fail("", "policy", "%v", err)
	default:
		policy = p
	}
	index := make(map[string]int, len(m.Tensors))
	for i, e := range m.Tensors {
		index[e.Name] = i
	}
	var order []string // the source's tensors the manifest holds, in source order
	for _, st := range src.Tensors {
		i, ok := index[st.Name]
		if !ok {
			continue // the source_set check names it
		}
		order = append(order, st.Name)
		got := pack.PlanOf(&m.Tensors[i])
		want := pack.Planned{Name: st.Name, Shape: st.Shape, SourceDType: st.DType}
		rule := ""
		if policy != nil {
			a, r, err := policy.Decide(st)
			if err != nil {
				fail(st.Name, "action", "the recorded policy cannot apply to the source tensor: %v", err)
				continue
			}
			want = pack.Plan(st, a)
			if r >= 0 {
				rule = fmt.Sprintf(" (policy rule %d: %s)", r+1, m.Policy[r])
			}
		}
		before := rep.Failed
		if !slices.Equal(got.Shape, want.Shape) {
			fail(st.Name, "shape", "manifest records %v, the source %s has %v", got.Shape, st.File, want.Shape)
		}
		if got.SourceDType != want.SourceDType {
			fail(st.Name, "source_dtype", "manifest records %q, the source %s has %q", got.SourceDType, st.File, want.SourceDType)
		}
		if policy != nil {
			if got.Kind != want.Kind {
				fail(st.Name, "kind", "manifest records %q, pack writes %q%s", got.Kind, want.Kind, rule)
			}
			if got.DType != want.DType {
				fail(st.Name, "dtype", "manifest records %q, pack writes %q%s", got.DType, want.DType, rule)
			}
			if gs, ws := granularityString(got.Granularity), granularityString(want.Granularity); gs != ws {
				fail(st.Name, "granularity", "manifest records %s, pack writes %s%s", gs, ws, rule)
			}
		}
		if rep.Failed == before {
			rep.add(CheckManifestField, st.Name, true, "")
		}
	}
	inSource := make(map[string]bool, len(order))
	for _, name := range order {
		inSource[name] = true
	}
	k := 0
	for _, e := range m.Tensors {
		if !inSource[e.Name] {
			continue
		}
		if e.Name != order[k] {
			fail(e.Name, "order", "manifest tensor %d of the source's %d, pack writes %q there (source order)", k, len(order), order[k])
			break
		}
		k++
	}
	for _, key := range slices.Sorted(maps.Keys(unionKeys(m.Source.Metadata, src.Metadata))) {
		got, inManifest := m.Source.Metadata[key]
		want, inSource := src.Metadata[key]
		switch {
		case !inSource:
			fail("", "source.metadata", "key %q = %q is not in the source's metadata", key, got)
		case !inManifest:
			fail("", "source.metadata", "key %q = %q of the source's metadata is missing", key, want)
		case got != want:
			fail("", "source.metadata", "key %q is %q, the source's metadata has %q", key, got, want)
		}
	}
	files := m.Source.Files
	for i := range min(len(files), len(src.Files)) {
		if want := filepath.Base(src.Files[i].Path); files[i].Name != want {
			fail("", "source.files", "file %d is named %q, the source's is %q", i, files[i].Name, want)
		}
	}
	return bad
}

func unionKeys(a, b map[string]string) map[string]bool {
	u := make(map[string]bool, len(a)+len(b))
	for k := range a {
		u[k] = true
	}
	for k := range b {
		u[k] = true
	}
	return u
}

func granularityString(g *convert.Granularity) string {
	if g == nil {
		return "no granularity"
	}
	return fmt.Sprintf("granularity %q", g.String())
}
