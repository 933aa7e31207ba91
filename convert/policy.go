package convert

import "strings"

// Action is what the packer does with one tensor.
type Action string

const (
	// ActionTernary ternarizes the tensor with the recipe.
	ActionTernary Action = "ternary"
	// ActionKeep stores the tensor's source bytes unchanged.
	ActionKeep Action = "keep"
)

// DefaultPolicy ternarizes every 2-D float tensor except embeddings and the
// output head (names containing "embed" or "lm_head"); it keeps the rest in
// their source dtype.
func DefaultPolicy(t *Tensor) Action {
	if len(t.Shape) != 2 || !t.IsFloat() {
		return ActionKeep
	}
	if strings.Contains(t.Name, "embed") || strings.Contains(t.Name, "lm_head") {
		return ActionKeep
	}
	return ActionTernary
}
