package verify

import (
	"errors"
	"io/fs"

	"ternkit/sign"
)

// CheckSignature is the check that the given key signed the manifest.
const CheckSignature = "signature"

func checkSignature(rep *Report, manifestHash [32]byte, key *sign.PublicKey, path string) {
	s, err := sign.ReadSignatureFile(path)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		rep.add(CheckSignature, "", false, "no signature file %s (want one made by key %s)", path, key.ID())
	case err != nil:
		rep.add(CheckSignature, "", false, "%v", err)
	default:
		if err := key.Verify(s, manifestHash); err != nil {
			rep.add(CheckSignature, "", false, "%s: %v", path, err)
		} else {
			rep.add(CheckSignature, "", true, "signed by key %s", key.ID())
		}
	}
}
