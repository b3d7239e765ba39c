package htmlreport

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"io"
)

// pageHTML is the page template: one HTML file with its CSS inline.
//
//go:embed page.html
var pageHTML string

// page is parsed once per render: templates are cheap and this keeps the
// package free of global mutable state.
func page(v *view) (*template.Template, error) {
	return template.New("page").Funcs(template.FuncMap{
		// The SVG is produced by this package from gonum/plot, which escapes
		// every text it draws, so it is safe to inline.
		"chart": func(name string) (template.HTML, error) {
			s, ok := v.Charts[name]
			if !ok {
				return "", fmt.Errorf("no %s chart", name)
			}
			return template.HTML(s), nil
		},
	}).Parse(pageHTML)
}

func writePage(w io.Writer, v *view) error {
	t, err := page(v)
	if err != nil {
		return fmt.Errorf("htmlreport: page template: %w", err)
	}
	// Render fully before writing, so a template error leaves w untouched.
	var b bytes.Buffer
	if err := t.Execute(&b, v); err != nil {
		return fmt.Errorf("htmlreport: %w", err)
	}
	_, err = b.WriteTo(w)
	return err
}
