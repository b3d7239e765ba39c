package pipeline

import (
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// tree creates files (with the given contents) under a fresh directory and
// returns it.
func tree(t *testing.T, files map[string]string) string {
	t.Helper()
	root := t.TempDir()
	for name, body := range files {
		p := filepath.Join(root, filepath.FromSlash(name))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return root
}

// show renders inputs relative to root for comparison.
func show(root string, ins []Input) string {
	var b strings.Builder
	for _, in := range ins {
		path := in.Path
		if r, err := filepath.Rel(root, path); err == nil && path != Stdin {
			path = filepath.ToSlash(r)
		}
		rootRel := ""
		if in.Root != "" {
			r, _ := filepath.Rel(root, in.Root)
			rootRel = filepath.ToSlash(r)
		}
		fmt.Fprintf(&b, "%s root=%s rel=%s %v", path, rootRel, filepath.ToSlash(in.Rel), in.Format)
		for _, p := range in.Partitions {
			fmt.Fprintf(&b, " %s=%s", p.Key, p.Value)
		}
		b.WriteString("\n")
	}
	return b.String()
}

func TestExpand(t *testing.T) {
	root := tree(t, map[string]string{
		"t/day=2024-05-02/part-1.parquet":      "PAR1",
		"t/day=2024-05-01/arm=a%2Fb/part-0.pq": "PAR1",
		"t/day=2024-05-01/part-0.parquet":      "PAR1",
		"t/_SUCCESS":                           "",
		"t/.part-0.parquet.crc":                "",
		"t/_temporary/0/part-9.parquet":        "PAR1",
		"t/notes.txt":                          "hello",
		"t/day=2024-05-01/sub/x.arrows":        "",
		"flat/a.csv":                           "x\n1\n",
		"flat/b.ARROW":                         "ARROW1",
		"flat/c.feather":                       "ARROW1",
		"flat/d.ipc":                           "ARROW1",
		"flat/e.parq":                          "PAR1",
		"sniff/noext":                          "PAR1....PAR1",
		"sniff/arrowfile":                      "ARROW1\x00\x00",
		"sniff/stream":                         "\xff\xff\xff\xff\x10\x00",
		"sniff/text":                           "id,arm\n",
		"empty/.hidden.parquet":                "",
		"empty/README.md":                      "",
		"glob/day=1/a.parquet":                 "PAR1",
		"glob/day=2/a.parquet":                 "PAR1",
		"glob/day=2/_b.parquet":                "PAR1",
	})
	in := func(p string) string { return filepath.Join(root, filepath.FromSlash(p)) }
	if err := os.Symlink(in("flat"), in("latest")); err != nil {
		t.Fatal(err)
	}

	tests := []struct {
		name    string
		args    []string
		want    string
		wantErr string // substring of the error
	}{
		{name: "directory: hive partitions, sorted, hidden skipped", args: []string{in("t")}, want: "" +
			"t/day=2024-05-01/arm=a%2Fb/part-0.pq root=t rel=day=2024-05-01/arm=a%2Fb/part-0.pq parquet day=2024-05-01 arm=a/b\n" +
			"t/day=2024-05-01/part-0.parquet root=t rel=day=2024-05-01/part-0.parquet parquet day=2024-05-01\n" +
			"t/day=2024-05-01/sub/x.arrows root=t rel=day=2024-05-01/sub/x.arrows arrow-stream day=2024-05-01\n" +
			"t/day=2024-05-02/part-1.parquet root=t rel=day=2024-05-02/part-1.parquet parquet day=2024-05-02\n"},
		{name: "extensions", args: []string{in("flat")}, want: "" +
			"flat/a.csv root=flat rel=a.csv csv\n" +
			"flat/b.ARROW root=flat rel=b.ARROW arrow-file\n" +
			"flat/c.feather root=flat rel=c.feather arrow-file\n" +
			"flat/d.ipc root=flat rel=d.ipc arrow-file\n" +
			"flat/e.parq root=flat rel=e.parq parquet\n"},
		{name: "symlinked directory", args: []string{in("latest")}, want: "" +
			"latest/a.csv root=latest rel=a.csv csv\n" +
			"latest/b.ARROW root=latest rel=b.ARROW arrow-file\n" +
			"latest/c.feather root=latest rel=c.feather arrow-file\n" +
			"latest/d.ipc root=latest rel=d.ipc arrow-file\n" +
			"latest/e.parq root=latest rel=e.parq parquet\n"},
		{name: "plain files, sniffed, in argument order", args: []string{in("sniff/stream"), in("sniff/noext"), in("sniff/arrowfile")}, want: "" +
			"sniff/stream root= rel=stream arrow-stream\n" +
			"sniff/noext root= rel=noext parquet\n" +
			"sniff/arrowfile root= rel=arrowfile arrow-file\n"},
		{name: "plain file keeps no partitions", args: []string{in("t/day=2024-05-02/part-1.parquet")},
			want: "t/day=2024-05-02/part-1.parquet root= rel=part-1.parquet parquet\n"},
		{name: "glob rooted at its literal prefix", args: []string{in("glob/day=*/*.parquet")}, want: "" +
			"glob/day=1/a.parquet root=glob rel=day=1/a.parquet parquet day=1\n" +
			"glob/day=2/a.parquet root=glob rel=day=2/a.parquet parquet day=2\n"},
		{name: "glob matching directories", args: []string{in("glob/day=[2]")},
			want: "glob/day=2/a.parquet root=glob rel=day=2/a.parquet parquet day=2\n"},
		{name: "duplicates dropped", args: []string{in("flat/a.csv"), in("flat"), in("flat/../flat/a.csv")}, want: "" +
			"flat/a.csv root= rel=a.csv csv\n" +
			"flat/b.ARROW root=flat rel=b.ARROW arrow-file\n" +
			"flat/c.feather root=flat rel=c.feather arrow-file\n" +
			"flat/d.ipc root=flat rel=d.ipc arrow-file\n" +
			"flat/e.parq root=flat rel=e.parq parquet\n"},
		{name: "stdin", args: []string{"-", in("flat/a.csv")}, want: "- root= rel=stdin arrow-stream\nflat/a.csv root= rel=a.csv csv\n"},
		{name: "stdin twice", args: []string{"-", "-"}, wantErr: `"-" given more than once`},
		{name: "no such file", args: []string{in("flat/zzz.parquet")}, wantErr: "zzz.parquet\": no such file"},
		{name: "glob without match", args: []string{in("flat/*.pq")}, wantErr: "*.pq\": pattern matches no data files"},
		{name: "bad glob", args: []string{in("flat/[.pq")}, wantErr: "[.pq\": syntax error in pattern"},
		{name: "directory without data", args: []string{in("empty")}, wantErr: "empty\": directory holds no data files"},
		{name: "unknown format", args: []string{in("sniff/text")}, wantErr: "text\": unknown format"},
		{name: "no arguments", args: nil, wantErr: "no input"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := Expand(tt.args)
			if tt.wantErr != "" {
				if err == nil || !strings.Contains(err.Error(), tt.wantErr) {
					t.Fatalf("error %v, want one containing %q", err, tt.wantErr)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if s := show(root, got); s != tt.want {
				t.Errorf("got\n%s\nwant\n%s", s, tt.want)
			}
			for _, in := range got {
				if in.Path == Stdin {
					if in.Size != -1 {
						t.Errorf("stdin size %d", in.Size)
					}
					continue
				}
				info, err := os.Stat(in.Path)
				if err != nil || info.Size() != in.Size {
					t.Errorf("%s: size %d, stat %v %v", in.Path, in.Size, info, err)
				}
			}
		})
	}
}

func TestGlobRoot(t *testing.T) {
	for _, tt := range []struct{ pattern, want string }{
		{"*.parquet", "."},
		{"data/*.parquet", "data"},
		{"data/day=*/x/*.parquet", "data"},
		{"/abs/d/part-?.pq", "/abs/d"},
		{"/*.pq", "/"},
		{"a/b/c[0-9]/f.pq", "a/b"},
	} {
		if got := globRoot(filepath.FromSlash(tt.pattern)); got != filepath.FromSlash(tt.want) {
			t.Errorf("globRoot(%q) = %q, want %q", tt.pattern, got, tt.want)
		}
	}
}

func TestFormatString(t *testing.T) {
	for f, want := range map[Format]string{FormatParquet: "parquet", FormatArrowFile: "arrow-file", FormatArrowStream: "arrow-stream", FormatCSV: "csv", 0: "Format(0)"} {
		if f.String() != want {
			t.Errorf("%d: %q, want %q", int(f), f.String(), want)
		}
	}
}
