package main

import (
	"bytes"
	"errors"
	"io/fs"
	"os"
	"path/filepath"
)

// checkDemoCompanions refuses a --dir whose config.json or vocabulary file
// is not the demo's own: the demo writes both under these common names,
// and would replace a real checkpoint's files.
func checkDemoCompanions(dir string) error {
	for name, want := range map[string][]byte{"config.json": demoConfig(), demoVocabFile: demoVocabulary()} {
		path := filepath.Join(dir, name)
		got, err := os.ReadFile(path)
		switch {
		case errors.Is(err, fs.ErrNotExist):
			continue
		case err != nil:
			return err
		case !bytes.Equal(got, want):
			return usagef("--dir %s holds %s, which is not the demo's and which the demo would replace: give a new or empty directory", dir, path)
		}
	}
	return nil
}
