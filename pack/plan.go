package pack

import (
	"ternkit/convert"
	"ternkit/manifest"
)

// Planned is what Build writes into a tensor's manifest entry before
// reading its bytes: everything that follows from the source's header and
// the policy. The codec (auto picks per tensor), the hashes, the scales and
// the statistics come from the bytes.
type Planned struct {
	Name        string
	Shape       []int64
	SourceDType string
	Kind        string               // manifest.KindTernary, KindInt8 or KindKept
	DType       string               // stored dtype of a kept tensor, else ""
	Granularity *convert.Granularity // ternary and int8 tensors, else nil
}

// Plan returns the entry Build writes for tensor t under action a.
func Plan(t *convert.Tensor, a convert.Action) Planned {
	p := Planned{Name: t.Name, Shape: t.Shape, SourceDType: t.DType}
	switch {
	case keptAsIs(a, t):
		p.Kind, p.DType = manifest.KindKept, t.DType
	case a.Kind == convert.ActTernary:
		g := a.Granularity
		p.Kind, p.Granularity = manifest.KindTernary, &g
	case a.Kind == convert.ActInt8:
		p.Kind, p.Granularity = manifest.KindInt8, &convert.Granularity{Kind: convert.GranRow}
	default:
		p.Kind, p.DType = manifest.KindKept, a.KeptDType(t.DType)
	}
	return p
}

// PlanOf is the planned part of a manifest entry.
func PlanOf(e *manifest.Tensor) Planned {
	return Planned{Name: e.Name, Shape: e.Shape, SourceDType: e.SourceDType, Kind: e.Kind, DType: e.DType, Granularity: e.Granularity}
}
