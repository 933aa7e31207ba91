// Package verify checks a ternkit artifact: its structure and every hash,
// every trit payload and scale, and, given the source checkpoint, that
// redoing each tensor's recorded action with the recorded recipe gives the
// same bytes, scales and statistics, and that the per-element error bound
// holds.
//
// A passing verification proves bytes and bounds, not task quality.
package verify

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"runtime"

	"ternkit/convert"
	"ternkit/pack"
)

// Check names, as they appear in reports.
const (
	CheckStructure  = "structure"    // preamble, trailer, manifest hash and rules, layout
	CheckSection    = "section_hash" // a section's BLAKE3
	CheckPadding    = "padding"      // zero bytes between sections
	CheckDecode     = "decode"       // payload decodes, counts match, scales are valid
	CheckSourceFile = "source_file"  // source files match the provenance
	CheckSourceSet  = "source_set"   // source and artifact hold the same tensors
	CheckSourceHash = "source_hash"  // a source tensor's bytes match the recorded hash
	CheckRequantize = "requantize"   // codes, scales and statistics match a fresh run
	CheckKept       = "kept_bytes"   // a kept tensor equals its (converted) source bytes
	CheckBound      = "bound"        // the per-element error bound, worst tensor named
	CheckBudget     = "budget"       // a tensor's statistics within the budget's limits
)

// Check is one verification step's outcome.
type Check struct {
	Name   string `json:"check"`
	Tensor string `json:"tensor,omitempty"`
	OK     bool   `json:"ok"`
	Detail string `json:"detail,omitempty"`
	// Recomputed is set on budget checks: whether the statistics judged
	// were recomputed from the source, or are the manifest's claims.
	Recomputed *bool `json:"recomputed,omitempty"`
}

// Report is the outcome of a verification.
type Report struct {
	Artifact string   `json:"artifact"`
	Source   string   `json:"source,omitempty"`
	Checks   []Check  `json:"checks"`
	Warnings []string `json:"warnings,omitempty"`
	// Notes say what was not checked and why (not warnings).
	Notes  []string `json:"notes,omitempty"`
	Passed int      `json:"passed"`
	Failed int      `json:"failed"`
	// SHA256 and BLAKE3 of the whole artifact, in lowercase hex, with
	// Options.Digests.
	SHA256 string `json:"sha256,omitempty"`
	BLAKE3 string `json:"blake3,omitempty"`

	manifestHash [32]byte
}

// ManifestHash is the BLAKE3 of the manifest the report's checks were
// made against (zero when the artifact could not be read).
func (r *Report) ManifestHash() [32]byte { return r.manifestHash }

// OK reports whether every check passed.
func (r *Report) OK() bool { return r.Failed == 0 && r.Passed > 0 }

// Failures lists the failed checks.
func (r *Report) Failures() []Check {
	var out []Check
	for _, c := range r.Checks {
		if !c.OK {
			out = append(out, c)
		}
	}
	return out
}

// Find returns the first check with the given name and tensor.
func (r *Report) Find(name, tensor string) (Check, bool) {
	for _, c := range r.Checks {
		if c.Name == name && c.Tensor == tensor {
			return c, true
		}
	}
	return Check{}, false
}

func (r *Report) add(name, tensor string, ok bool, format string, args ...any) {
	c := Check{Name: name, Tensor: tensor, OK: ok}
	if format != "" {
		c.Detail = fmt.Sprintf(format, args...)
	}
	r.Checks = append(r.Checks, c)
	if ok {
		r.Passed++
	} else {
		r.Failed++
	}
}

// Options control Run.
type Options struct {
	// Source, when set, is the checkpoint the artifact claims to come from.
	Source *convert.Source
	// Budget, when set, limits the tensors' error statistics.
	Budget *Budget
	// Workers check sections and source tensors in parallel; 0 means one
	// per CPU. The report is the same for any count.
	Workers int
	// Progress, when set, is called with the bytes read so far and their
	// total (every section, plus every source tensor when Source is set):
	// once before the first read and after each section and source tensor.
	// It runs on Run's goroutine and must return quickly.
	Progress func(done, total int64)
	// Signature, when set, requires a valid signature over the manifest,
	// checked right after the manifest is read, before any section, from
	// the same open file as every other check.
	Signature *Signature
	// Digests, when set, fills the report's SHA256 and BLAKE3 of the whole
	// artifact, read from the same open file.
	Digests bool

	afterSignature func() // test hook: runs between the signature and the section checks
}

// progressFunc returns the function Run calls after reading n bytes.
func progressFunc(opts Options, a *pack.Artifact) func(n int64) {
	if opts.Progress == nil {
		return func(int64) {}
	}
	var done, total int64
	for _, e := range a.Tensors() {
		total += e.StoredBytes()
	}
	for _, c := range a.Companions() {
		total += c.Section.Length
	}
	if opts.Source != nil {
		for _, t := range opts.Source.Tensors {
			total += t.Length
		}
	}
	advance := func(n int64) {
		done += n
		opts.Progress(done, total)
	}
	advance(0)
	return advance
}

// Run verifies the artifact at path. It returns an error only when the
// artifact or the source cannot be read at all (missing file, permission,
// malformed source); everything wrong inside the artifact is a failed
// check in the report.
func Run(path string, opts Options) (*Report, error) {
	a, err := pack.Open(path)
	return run(path, a, err, opts)
}

// RunReaderAt verifies an artifact of the given size read from r (a file
// already open, a memory map, a buffer); name is used in the report.
func RunReaderAt(name string, r io.ReaderAt, size int64, opts Options) (*Report, error) {
	a, err := pack.NewReader(r, size)
	return run(name, a, err, opts)
}

func run(name string, a *pack.Artifact, openErr error, opts Options) (*Report, error) {
	rep := &Report{Artifact: name}
	if openErr != nil {
		var fe *pack.FormatError
		if errors.As(openErr, &fe) {
			rep.add(CheckStructure, "", false, "%v", openErr)
			if opts.Signature != nil {
				rep.add(CheckSignature, "", false, "not checked: the artifact's structure is invalid")
			}
			return rep, nil
		}
		if errors.Is(openErr, fs.ErrNotExist) || errors.Is(openErr, fs.ErrPermission) {
			return nil, openErr
		}
		return nil, fmt.Errorf("open %s: %w", name, openErr)
	}
	defer a.Close()
	rep.add(CheckStructure, "", true, "")
	rep.manifestHash = a.ManifestHash()
	if opts.Signature != nil {
		checkSignature(rep, rep.manifestHash, opts.Signature)
	}
	if opts.afterSignature != nil {
		opts.afterSignature()
	}
	mapped := mapArtifact(a)
	advance := progressFunc(opts, a)
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	// the whole file's digests, only when asked for (the JSON report
	// prints them), beside the section checks: SHA-256 is one sequential
	// pass, which runs while the section jobs share the other CPUs
	digestErr := make(chan error, 1)
	if opts.Digests {
		go func() { digestErr <- digests(rep, a, mapped, workers) }()
	} else {
		digestErr <- nil
	}
	checkSections(rep, a, artifactBytes{a.ReaderAt(), mapped}, workers, advance)
	if err := <-digestErr; err != nil {
		// like a section that cannot be read: the file changed under us
		rep.add(CheckStructure, "", false, "reading the whole file for its digests: %v", err)
	}
	checkConfig(rep, a)
	// the source checks read the artifact by tensor; unmapping first keeps
	// the mapped pages out of the resident size while the source is read
	unmapArtifact(mapped)
	if opts.Source != nil {
		rep.Source = opts.Source.Path
		if err := checkAgainst(rep, a, opts.Source, workers, advance); err != nil {
			return nil, err
		}
		checkCompanionsAgainst(rep, a, opts.Source)
	}
	if opts.Budget != nil {
		checkBudget(rep, a.Manifest(), opts.Budget, recomputedBy(rep, opts.Source != nil))
	}
	return rep, nil
}

// recomputedBy reports, per tensor, whether checking against the source
// recomputed its statistics and found the manifest's: its requantize or
// kept check passed.
func recomputedBy(rep *Report, against bool) func(string) bool {
	ok := map[string]bool{}
	if against {
		for _, c := range rep.Checks {
			if (c.Name == CheckRequantize || c.Name == CheckKept) && c.Tensor != "" {
				ok[c.Tensor] = c.OK
			}
		}
	}
	return func(tensor string) bool { return ok[tensor] }
}
