package main

import (
	"strings"

	"github.com/spf13/cobra"

	"ternkit/pack"
)

// Shell completion: `ternkit completion bash|zsh|fish|powershell` prints a
// script (cobra's generator); the script asks the binary itself what to
// complete, so the functions below decide the candidates.

// fixedCompletions completes a flag from a fixed list.
func fixedCompletions(values ...string) cobra.CompletionFunc {
	return func(*cobra.Command, []string, string) ([]cobra.Completion, cobra.ShellCompDirective) {
		return values, cobra.ShellCompDirectiveNoFileComp
	}
}

// fileCompletion completes the first argument with files of one extension.
func fileCompletion(ext string) cobra.CompletionFunc {
	return func(_ *cobra.Command, args []string, _ string) ([]cobra.Completion, cobra.ShellCompDirective) {
		if len(args) > 0 {
			return nil, cobra.ShellCompDirectiveNoFileComp
		}
		return []cobra.Completion{ext}, cobra.ShellCompDirectiveFilterFileExt
	}
}

var (
	artifactCompletion   = fileCompletion(strings.TrimPrefix(pack.Extension, "."))
	checkpointCompletion = fileCompletion("safetensors")
)

// finishCommands adds the help and completion commands with examples, so
// that every command shows how it is used.
func finishCommands(root *cobra.Command) {
	root.Example = `  ternkit demo --dir /tmp/scout
  ternkit pack model.safetensors -o model.tkart
  ternkit verify model.tkart --against model.safetensors
  ternkit inspect model.tkart --sort error
  ternkit report model.tkart -o model.html`
	root.InitDefaultHelpCmd()
	root.InitDefaultCompletionCmd()
	for _, c := range root.Commands() {
		switch c.Name() {
		case "help":
			c.Example = "  ternkit help pack\n  ternkit pack --help"
		case "completion":
			c.Example = completionExamples("")
			c.RunE = completionUsage
			for _, shell := range c.Commands() {
				shell.Example = completionExamples(shell.Name())
			}
		}
	}
}

func completionExamples(shell string) string {
	ex := map[string]string{
		"bash":       "  source <(ternkit completion bash)                      # this shell\n  ternkit completion bash > /etc/bash_completion.d/ternkit  # every new shell",
		"zsh":        "  ternkit completion zsh > \"${fpath[1]}/_ternkit\"",
		"fish":       "  ternkit completion fish > ~/.config/fish/completions/ternkit.fish",
		"powershell": "  ternkit completion powershell | Out-String | Invoke-Expression",
	}
	if shell != "" {
		return ex[shell]
	}
	return ex["bash"] + "\n" + ex["zsh"] + "\n" + ex["fish"]
}

// completionUsage runs for `completion` without a known shell: a usage
// error (exit 2) naming the shells, not the help text with exit 0.
func completionUsage(cmd *cobra.Command, args []string) error {
	var shells []string
	for _, c := range cmd.Commands() {
		if c.IsAvailableCommand() {
			shells = append(shells, c.Name())
		}
	}
	if len(args) == 0 {
		return usagef("completion needs a shell: %s", strings.Join(shells, ", "))
	}
	return usagef("completion: unknown shell %q%s (valid: %s)", args[0], didYouMean(args[0], shells), strings.Join(shells, ", "))
}
