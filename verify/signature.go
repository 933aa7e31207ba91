package verify

import (
	"errors"
	"io"
	"io/fs"

	"ternkit/internal/filedigest"
	"ternkit/pack"
	"ternkit/sign"
)

// CheckSignature is the check that a key signed the artifact's manifest.
const CheckSignature = "signature"

// Signature asks Run for the check that Key signed the artifact's
// manifest, with the signature (either form of sign/FORMAT.md) read from
// Path.
type Signature struct {
	Key  *sign.PublicKey
	Path string
}

// checkSignature adds the signature check for the manifest hash read from
// the artifact's one open file. A missing or malformed signature file,
// another key's signature, or a manifest changed since signing fails it.
func checkSignature(rep *Report, hash [32]byte, opt *Signature) {
	s, err := sign.ReadSignatureFile(opt.Path)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		rep.add(CheckSignature, "", false, "no signature file %s (want one made by key %s)", opt.Path, opt.Key.ID())
	case err != nil:
		rep.add(CheckSignature, "", false, "%v", err)
	default:
		if err := opt.Key.Verify(s, hash); err != nil {
			rep.add(CheckSignature, "", false, "%s: %v", opt.Path, err)
		} else {
			rep.add(CheckSignature, "", true, "%s signature by key %s (%s)", s.Form(), opt.Key.ID(), opt.Path)
		}
	}
}

// digests fills rep's SHA256 and BLAKE3 of the whole artifact: from the
// mapping when there is one (BLAKE3 by the tree on up to workers
// goroutines, SHA-256 beside it), else in one pass over the open file.
func digests(rep *Report, a *pack.Artifact, mapped []byte, workers int) error {
	var d filedigest.Digests
	if mapped != nil {
		err := artifactBytes{a.ReaderAt(), mapped}.guard(func() { d = filedigest.Bytes(mapped, workers) })
		if err != nil {
			return err
		}
	} else {
		both := filedigest.New()
		if _, err := io.Copy(both, io.NewSectionReader(a.ReaderAt(), 0, a.Size())); err != nil {
			return err
		}
		d = both.Digests()
	}
	rep.SHA256, rep.BLAKE3 = d.SHA256, d.BLAKE3
	return nil
}
