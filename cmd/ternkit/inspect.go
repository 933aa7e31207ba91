package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strings"
	"text/tabwriter"

	"github.com/spf13/cobra"
	"github.com/zeebo/blake3"

	"ternkit/convert"
	"ternkit/manifest"
	"ternkit/pack"
)

// inspectTensor is one row of `inspect --json`.
type inspectTensor struct {
	Name          string  `json:"name"`
	Shape         []int64 `json:"shape"`
	Kind          string  `json:"kind"`
	Codec         string  `json:"codec"`
	SourceDType   string  `json:"source_dtype"`
	Bytes         int64   `json:"bytes"`
	BitsPerWeight float64 `json:"bits_per_weight"`
	ZeroFraction  float64 `json:"zero_fraction"`
	Scale         float32 `json:"scale,omitempty"`
	RelRMSE       float64 `json:"rel_rmse,omitempty"`
}

// inspectReport is the whole of `inspect --json`.
type inspectReport struct {
	Artifact       string          `json:"artifact"`
	Bytes          int64           `json:"bytes"`
	FileBLAKE3     string          `json:"file_blake3"`
	ManifestBLAKE3 string          `json:"manifest_blake3"`
	Tool           string          `json:"tool"`
	Created        string          `json:"created,omitempty"`
	Recipe         convert.Recipe  `json:"recipe"`
	Policy         []string        `json:"policy,omitempty"`
	Totals         manifest.Totals `json:"totals"`
	Tensors        []inspectTensor `json:"tensors"`
}

func newInspectCmd() *cobra.Command {
	var asJSON bool
	cmd := &cobra.Command{
		Use:   "inspect ARTIFACT",
		Short: "Show what an artifact holds",
		Long: `inspect reads an artifact's manifest and prints one row per tensor (shape,
kind, codec, bits per weight, zero fraction, relative error, bytes) and the
totals. It checks the manifest hash but not the sections: use verify for that.`,
		Example: `  ternkit inspect model.tkart
  ternkit inspect model.tkart --json`,
		Args: exactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			rep, err := inspectArtifact(args[0])
			if err != nil {
				return err
			}
			if asJSON {
				enc := json.NewEncoder(cmd.OutOrStdout())
				enc.SetIndent("", "  ")
				return enc.Encode(rep)
			}
			printInspect(cmd.OutOrStdout(), rep)
			return nil
		},
	}
	cmd.Flags().BoolVar(&asJSON, "json", false, "print as JSON")
	return cmd
}

func inspectArtifact(path string) (*inspectReport, error) {
	a, err := pack.Open(path)
	if err != nil {
		return nil, err
	}
	defer a.Close()
	sum, err := fileBLAKE3(path)
	if err != nil {
		return nil, err
	}
	m := a.Manifest()
	mh := a.ManifestHash()
	rep := &inspectReport{
		Artifact: path, Bytes: a.Size(), FileBLAKE3: sum, ManifestBLAKE3: manifest.HexHash(mh),
		Tool: m.Tool, Created: m.Created, Recipe: m.Recipe, Policy: m.Policy, Totals: m.Totals, Tensors: make([]inspectTensor, 0, len(m.Tensors)),
	}
	for _, e := range m.Tensors {
		n := manifest.NumElements(e.Shape)
		row := inspectTensor{Name: e.Name, Shape: e.Shape, Kind: e.Kind, Codec: e.Codec, SourceDType: e.SourceDType,
			Bytes: e.Section.Length, Scale: e.Scale}
		if n > 0 {
			row.BitsPerWeight = 8 * float64(e.Section.Length) / float64(n)
		}
		if e.Trits != nil && n > 0 {
			row.ZeroFraction = float64(e.Trits.Zero) / float64(n)
		}
		if e.RelRMSE != nil {
			row.RelRMSE = *e.RelRMSE
		}
		rep.Tensors = append(rep.Tensors, row)
	}
	return rep, nil
}

func fileBLAKE3(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := blake3.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("read %s: %w", path, err)
	}
	var sum [32]byte
	h.Sum(sum[:0])
	return manifest.HexHash(sum), nil
}

func printInspect(w io.Writer, rep *inspectReport) {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "TENSOR\tSHAPE\tKIND\tCODEC\tBITS/W\tZERO%\tREL.ERR\tBYTES")
	for _, t := range rep.Tensors {
		zero, rel := "-", "-"
		if t.Kind == manifest.KindTernary {
			zero = fmt.Sprintf("%.1f", 100*t.ZeroFraction)
			rel = fmt.Sprintf("%.4f", t.RelRMSE)
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%.3f\t%s\t%s\t%d\n", t.Name, shapeString(t.Shape), t.Kind, t.Codec,
			t.BitsPerWeight, zero, rel, t.Bytes)
	}
	tw.Flush()
	tot := rep.Totals
	fmt.Fprintf(w, "\n%d tensors (%d ternary, %d kept); source %s, artifact %s (%.2fx smaller)\n",
		tot.Tensors, tot.TernaryTensors, tot.KeptTensors, humanBytes(tot.SourceBytes), humanBytes(rep.Bytes), ratio(tot.SourceBytes, rep.Bytes))
	fmt.Fprintf(w, "ternary weights: %d at %.3f bits/weight; recipe %s/%s eps=%g ties %s\n",
		tot.TernaryParams, tot.BitsPerTernaryWeight, rep.Recipe.Method, rep.Recipe.ScaleRule, rep.Recipe.Epsilon, rep.Recipe.Tie)
	if len(rep.Policy) > 0 {
		fmt.Fprintf(w, "policy: %s\n", strings.Join(rep.Policy, "; "))
	}
	if rep.Created != "" {
		fmt.Fprintf(w, "created %s by %s\n", rep.Created, rep.Tool)
	}
	fmt.Fprintf(w, "file BLAKE3 %s\n", rep.FileBLAKE3)
}

func shapeString(shape []int64) string {
	parts := make([]string, len(shape))
	for i, d := range shape {
		parts[i] = fmt.Sprint(d)
	}
	return "[" + strings.Join(parts, "x") + "]"
}
