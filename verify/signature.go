package verify

import (
	"errors"
	"io/fs"

	"ternkit/pack"
	"ternkit/sign"
)

// CheckSignature is the check that a key signed the artifact's manifest.
const CheckSignature = "signature"

// AddSignatureCheck adds to rep the check that key signed the manifest of the
// artifact at path, with the signature read from sigPath. A missing or
// malformed signature file, another key's signature, or a manifest changed
// since signing fails the check; so does an artifact that cannot be opened.
func AddSignatureCheck(rep *Report, path string, key *sign.PublicKey, sigPath string) {
	a, err := pack.Open(path)
	if err != nil {
		rep.add(CheckSignature, "", false, "not checked: %v", err)
		return
	}
	hash := a.ManifestHash()
	a.Close()
	s, err := sign.ReadSignatureFile(sigPath)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		rep.add(CheckSignature, "", false, "no signature file %s (want one made by key %s)", sigPath, key.ID())
	case err != nil:
		rep.add(CheckSignature, "", false, "%v", err)
	default:
		if err := key.Verify(s, hash); err != nil {
			rep.add(CheckSignature, "", false, "%s: %v", sigPath, err)
		} else {
			rep.add(CheckSignature, "", true, "signed by key %s", key.ID())
		}
	}
}
