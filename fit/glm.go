package fit

// Families of generalized linear model.
const (
	FamilyBinomial = "binomial" // logistic regression
	FamilyGaussian = "gaussian" // linear least squares
)

// Design is a column-major design matrix without the intercept column:
// Cols[j][i] is term j+1 of row i. The fitters add the intercept themselves.
type Design struct {
	N    int
	Cols [][]float64
}

// GLMOptions control a fit.
type GLMOptions struct {
	// Ridge is λ in the penalty (λ/2)·Σ_j (s_j β_j)², s_j the sample SD of
	// term j: a ridge on the internally standardized terms; the intercept is
	// not penalized. 0 means none.
	Ridge   float64
	Tol     float64 // convergence tolerance on the relative change in deviance; 0 means 1e-10
	MaxIter int     // 0 means 100
}

// GLM is a fitted model, coefficients on the original scale of the terms.
type GLM struct {
	Family     string      `json:"family"`
	Terms      []string    `json:"terms"` // "intercept" first
	Coef       []float64   `json:"coef"`
	SE         []float64   `json:"se"`
	Cov        [][]float64 `json:"cov"` // inverse observed (penalized) information; for gaussian scaled by Scale
	N          int         `json:"n"`
	LogLik     float64     `json:"loglik"`
	Deviance   float64     `json:"deviance"`
	Scale      float64     `json:"scale,omitempty"` // gaussian residual variance, RSS/(n−p)
	Iterations int         `json:"iterations"`
	Converged  bool        `json:"converged"`
	Tol        float64     `json:"tol"`
	Ridge      float64     `json:"ridge,omitempty"`
	Warnings   []string    `json:"warnings,omitempty"`
}
