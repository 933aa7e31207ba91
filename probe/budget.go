package probe

import "fmt"

// Budget bounds a comparison; a nil limit is not checked.
type Budget struct {
	MinTop1         *float64 // least top-1 agreement, 0..1
	MaxKL           *float64 // largest mean KL divergence, nats
	MaxLossIncrease *float64 // largest NLL increase of the artifact over the source, nats (needs NLL)
}

// Check returns one line per broken limit, naming metric, value and
// limit; an error when a limit needs what the result lacks.
func (b Budget) Check(res *Result) ([]string, error) {
	var broken []string
	if (b.MinTop1 != nil || b.MaxKL != nil || b.MaxLossIncrease != nil) && !res.Compared {
		return nil, fmt.Errorf("budgets compare with the source: give --against")
	}
	if b.MinTop1 != nil && res.Top1 < *b.MinTop1 {
		broken = append(broken, fmt.Sprintf("top-1 agreement %.4f is below --min-top1 %g", res.Top1, *b.MinTop1))
	}
	if b.MaxKL != nil && res.MeanKL > *b.MaxKL {
		broken = append(broken, fmt.Sprintf("mean KL %.4g is above --max-kl %g", res.MeanKL, *b.MaxKL))
	}
	if b.MaxLossIncrease != nil {
		if res.NLLArtifact == nil || res.NLLSource == nil {
			return nil, fmt.Errorf("--max-loss-increase needs text: give --tokens FILE")
		}
		if d := *res.NLLArtifact - *res.NLLSource; d > *b.MaxLossIncrease {
			broken = append(broken, fmt.Sprintf("NLL increase %.4g (artifact %.4g, source %.4g) is above --max-loss-increase %g",
				d, *res.NLLArtifact, *res.NLLSource, *b.MaxLossIncrease))
		}
	}
	return broken, nil
}
