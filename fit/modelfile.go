package fit

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"slices"
	"strings"

	"github.com/heft-project/heft/pipeline"
)

// ComputeChecksum is "sha256:" and the hex SHA-256 of json.Marshal of the
// model with Checksum "": the compact form, so re-indenting the file does
// not change it.
func (m *Model) ComputeChecksum() (string, error) {
	c := *m
	c.Checksum = ""
	b, err := json.Marshal(&c)
	if err != nil {
		return "", fmt.Errorf("model cannot be written as JSON: %w", err)
	}
	sum := sha256.Sum256(b)
	return "sha256:" + hex.EncodeToString(sum[:]), nil
}

// Marshal sets the checksum and returns the model file's bytes: JSON with
// two-space indentation and a trailing newline.
func (m *Model) Marshal() ([]byte, error) {
	sum, err := m.ComputeChecksum()
	if err != nil {
		return nil, err
	}
	m.Checksum = sum
	b, err := json.MarshalIndent(m, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("model cannot be written as JSON: %w", err)
	}
	return append(b, '\n'), nil
}

// Save writes the model file at path atomically: a temporary file beside it
// is written, synced and renamed over path, so a failure leaves either the
// old file or none.
func (m *Model) Save(path string) error {
	b, err := m.Marshal()
	if err != nil {
		return fmt.Errorf("%s: %w", path, err)
	}
	return writeAtomic(path, b) // its errors name path
}

// writeAtomic writes through pipeline's atomic file: the temporary name
// lets a later run remove what a killed one left, and the mode is 0666 less
// the umask, as os.Create gives.
func writeAtomic(path string, data []byte) error {
	return pipeline.WriteFileAtomic(path, data)
}

// Load reads and checks a model file. It refuses a file that is not valid
// JSON (giving the byte offset), has another format name, a format version
// newer than FormatVersion, a checksum that does not match its contents, or
// parts that disagree with each other. Every message starts with path.
func Load(path string) (*Model, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		var pe *fs.PathError
		if errors.As(err, &pe) {
			err = pe.Err
		}
		return nil, fmt.Errorf("%s: cannot read model file: %w", path, err)
	}
	m, err := Unmarshal(b)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return m, nil
}

// Unmarshal is Load without the file: it parses and checks model file bytes.
func Unmarshal(b []byte) (*Model, error) {
	var head struct {
		Format        *string `json:"format"`
		FormatVersion *int    `json:"format_version"`
	}
	if err := json.Unmarshal(b, &head); err != nil {
		return nil, jsonErr(err, b)
	}
	switch {
	case head.Format == nil:
		return nil, fmt.Errorf("not a heft model file: no %q field", "format")
	case *head.Format != FormatName:
		return nil, fmt.Errorf("not a heft model file: format is %q, want %q", *head.Format, FormatName)
	case head.FormatVersion == nil:
		return nil, errors.New("model file has no format_version")
	case *head.FormatVersion > FormatVersion:
		return nil, fmt.Errorf("model format version %d is newer than this heft supports (%d); upgrade heft", *head.FormatVersion, FormatVersion)
	case *head.FormatVersion < 1:
		return nil, fmt.Errorf("model format version %d is not valid", *head.FormatVersion)
	}
	m := new(Model)
	if err := json.Unmarshal(b, m); err != nil {
		return nil, jsonErr(err, b)
	}
	sum, err := m.ComputeChecksum()
	if err != nil {
		return nil, err
	}
	switch {
	case m.Checksum == "":
		return nil, errors.New("model file has no checksum")
	case m.Checksum != sum:
		return nil, fmt.Errorf("model file was edited: checksum %s recorded, contents give %s", m.Checksum, sum)
	}
	if err := m.Validate(); err != nil {
		return nil, err
	}
	return m, nil
}

func jsonErr(err error, b []byte) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		what := "is not valid JSON"
		if se.Offset >= int64(len(bytes.TrimRight(b, " \t\r\n"))) {
			what = "is truncated"
		}
		return fmt.Errorf("model file %s at byte offset %d: %v", what, se.Offset, se)
	case errors.As(err, &te):
		return fmt.Errorf("model file field %q at byte offset %d holds a JSON %s, want %v", te.Field, te.Offset, te.Value, te.Type)
	case errors.Is(err, io.ErrUnexpectedEOF):
		return errors.New("model file is truncated")
	}
	return fmt.Errorf("model file cannot be read: %w", err)
}

// Validate checks that the parts of the model agree: terms, coefficients
// and covariance have matching sizes, the outcome models and the reference
// summaries use the encoding's terms.
func (m *Model) Validate() error {
	e := &m.Encoding
	switch e.Missing {
	case MissingError, MissingIndicator:
	default:
		return fmt.Errorf("model file: unknown missing-value policy %q", e.Missing)
	}
	if e.Treatment.Column == "" || e.Treatment.TreatedValue == e.Treatment.ControlValue {
		return errors.New("model file: the treatment column or its two values are missing")
	}
	for _, c := range e.Columns {
		switch c.Kind {
		case KindNumeric:
		case KindCategorical:
			if slices.Contains(c.Levels, c.Reference) {
				return fmt.Errorf("model file: column %q lists its reference level %q among its levels", c.Name, c.Reference)
			}
		default:
			return fmt.Errorf("model file: column %q has unknown kind %q", c.Name, c.Kind)
		}
	}
	terms := e.Terms()
	if err := checkGLM("propensity model", &m.Propensity, terms); err != nil {
		return err
	}
	if m.Propensity.Family != FamilyBinomial {
		return fmt.Errorf("model file: propensity model family is %q, want %q", m.Propensity.Family, FamilyBinomial)
	}
	if o := m.Outcome; o != nil {
		if e.Outcome == nil {
			return errors.New("model file: outcome models without an outcome column in the encoding")
		}
		for _, g := range []struct {
			name string
			glm  *GLM
		}{{"treated-arm outcome model", &o.Treated}, {"control-arm outcome model", &o.Control}} {
			if err := checkGLM(g.name, g.glm, terms); err != nil {
				return err
			}
		}
	}
	ref := m.Reference.Terms
	if len(ref) != len(terms)-1 {
		return fmt.Errorf("model file: reference has %d terms, the encoding %d", len(ref), len(terms)-1)
	}
	for j, r := range ref {
		if r.Term != terms[j+1] {
			return fmt.Errorf("model file: reference term %d is %q, the encoding's is %q", j+1, r.Term, terms[j+1])
		}
	}
	return nil
}

func checkGLM(name string, g *GLM, terms []string) error {
	p := len(terms)
	if !slices.Equal(g.Terms, terms) {
		return fmt.Errorf("model file: %s terms [%s] do not match the encoding's [%s]", name, strings.Join(g.Terms, ", "), strings.Join(terms, ", "))
	}
	if len(g.Coef) != p {
		return fmt.Errorf("model file: %s has %d coefficients for %d terms", name, len(g.Coef), p)
	}
	if len(g.SE) != 0 && len(g.SE) != p {
		return fmt.Errorf("model file: %s has %d standard errors for %d terms", name, len(g.SE), p)
	}
	if len(g.Cov) != p {
		return fmt.Errorf("model file: %s covariance has %d rows, want %d", name, len(g.Cov), p)
	}
	for i, r := range g.Cov {
		if len(r) != p {
			return fmt.Errorf("model file: %s covariance row %d has %d entries, want %d", name, i, len(r), p)
		}
	}
	return nil
}
