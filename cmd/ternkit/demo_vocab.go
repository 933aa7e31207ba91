package main

import (
	"encoding/json"
	"fmt"
)

// demoVocabFile is the name of the scenario's vocabulary file, written
// beside config.json and carried into the artifact as a companion.
const demoVocabFile = "vocab.json"

// demoVocabulary is the scanner assistant's vocabulary in a JSON layout of
// the scenario's own: the token strings in id order (id = position), the
// ids of the control tokens, and how text is split (by whole words of
// the list, bytes otherwise). It has exactly demoVocab tokens, as the
// config's vocab_size and the embedding's rows say.
func demoVocabulary() []byte {
	control := []string{"<pad>", "<start>", "<end>", "<scan>", "<shelf>", "<unknown>"}
	words := []string{
		"seed", "seeds", "vault", "drawer", "shelf", "row", "tray", "packet", "envelope", "jar",
		"barley", "rye", "oat", "lentil", "flax", "clover", "sorrel", "yarrow", "fern", "moss",
		"moisture", "temperature", "humidity", "germination", "viability", "count", "weight", "lot",
		"harvest", "sealed", "opened", "checked", "missing", "moved", "returned", "low", "ok", "alert",
		"where", "is", "the", "how", "many", "in", "on", "at", "of", "and", "to", "from",
	}
	tokens := append([]string{}, control...)
	for b := 0; b < 256; b++ {
		tokens = append(tokens, fmt.Sprintf("<byte %02X>", b))
	}
	tokens = append(tokens, words...)
	for i := 0; len(tokens) < demoVocab; i++ {
		tokens = append(tokens, fmt.Sprintf("lot-%04d", i)) // inventory lot numbers, one token each
	}
	ids := map[string]int{}
	for i, c := range control {
		ids[c] = i
	}
	b, err := json.MarshalIndent(struct {
		Layout  string         `json:"layout"`
		Model   string         `json:"model"`
		Split   string         `json:"split"`
		Control map[string]int `json:"control"`
		Tokens  []string       `json:"tokens"`
	}{"fernmoss-scout-vocabulary/1", demoModel, "whole words of the list, lowercased; any other byte as its <byte XX> token", ids, tokens}, "", " ")
	if err != nil {
		panic(err) // strings and ints always encode
	}
	return append(b, '\n')
}
