module ternkit

go 1.26.8

require (
	github.com/BurntSushi/toml v1.6.0
	github.com/klauspost/compress v1.20.4
	github.com/nlpodyssey/safetensors v0.0.0-20250209183917-bfb01cc25f7c
	github.com/schollz/progressbar/v3 v3.19.1
	github.com/spf13/cobra v1.10.2
	github.com/spf13/pflag v1.0.9
	github.com/stretchr/testify v1.12.1
	github.com/x448/float16 v0.8.4
	github.com/zeebo/blake3 v0.2.4
	golang.org/x/net v0.62.0
	golang.org/x/sys v0.49.0
	golang.org/x/term v0.47.0
	lukechampine.com/blake3 v1.4.1
)

require (
	github.com/inconshreveable/mousetrap v1.1.0 // indirect
	github.com/klauspost/cpuid/v2 v2.0.12 // indirect
	github.com/mitchellh/colorstring v0.0.0-20190213212951-d06e56a500db // indirect
	github.com/rivo/uniseg v0.4.7 // indirect
	go.yaml.in/yaml/v3 v3.0.5 // indirect
)
