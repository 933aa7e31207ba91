package report

// Page holds what a report page shows beyond the manifest: the outcome of
// a verification, when one was run or read, and the error budget.
type Page struct {
	Verification *Verification
	// Budget lists the relative-RMSE limits to draw on the error chart.
	Budget []BudgetLine
}

// Verification is a verify run's outcome as the page shows it.
type Verification struct {
	From     string   // how it was obtained: "ternkit verify, run for this page" or "verify JSON FILE"
	Source   string   // the checkpoint checked against; "" for the artifact alone
	OK       bool     // every check passed
	Passed   int      // checks passed
	Failed   int      // checks failed
	Failures []string // the failed checks, in words (at most a few)
	Bound    string   // the per-element bound's detail, when checked
	Warnings []string
	// Signature is the signature check's detail ("" when no key was
	// given); SignatureOK whether it passed.
	Signature   string
	SignatureOK bool
}

// BudgetLine is a max_rel_rmse limit: the glob it applies to and its value.
type BudgetLine struct {
	Match string
	Value float64
}
