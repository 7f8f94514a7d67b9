package data

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"sort"
	"strings"
)

// source is one corpus file, or standard input.
type source struct {
	Path  string // path as opened; "-" for standard input
	Size  int64
	MTime int64 // modification time, Unix nanoseconds

	display string // name in messages when not Path ("-" for spooled standard input)
}

func (s source) name() string {
	if s.display != "" {
		return s.display
	}
	return s.Path
}

// resolveSources expands cfg.Files into the files to read, in order.
// Relative paths resolve against baseDir.
func resolveSources(cfg Config, baseDir string) ([]source, error) {
	var out []source
	for _, f := range cfg.Files {
		if f == "-" {
			out = append(out, source{Path: "-"})
			continue
		}
		p := f
		if !filepath.IsAbs(p) && baseDir != "" {
			p = filepath.Join(baseDir, p)
		}
		if strings.ContainsAny(f, "*?[") {
			matches, err := filepath.Glob(p)
			if err != nil {
				return nil, fmt.Errorf("data.files: bad glob pattern %q", f)
			}
			if len(matches) == 0 {
				return nil, fmt.Errorf("data.files: pattern %q matches no files", p)
			}
			sort.Strings(matches)
			for _, m := range matches {
				srcs, err := statSource(m, cfg)
				if err != nil {
					return nil, err
				}
				out = append(out, srcs...)
			}
			continue
		}
		srcs, err := statSource(p, cfg)
		if err != nil {
			return nil, err
		}
		out = append(out, srcs...)
	}
	return out, nil
}

// statSource returns the file at p, or the filtered files under the
// directory p.
func statSource(p string, cfg Config) ([]source, error) {
	fi, err := os.Stat(p)
	if err != nil {
		return nil, fileError(p, err)
	}
	if !fi.IsDir() {
		if !fi.Mode().IsRegular() && fi.Mode()&fs.ModeNamedPipe == 0 && fi.Mode()&fs.ModeCharDevice == 0 {
			return nil, fmt.Errorf("corpus %q: not a regular file", p)
		}
		return []source{{Path: p, Size: fi.Size(), MTime: fi.ModTime().UnixNano()}}, nil
	}
	var out []source
	err = filepath.WalkDir(p, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return fileError(path, err)
		}
		name := d.Name()
		if path != p && strings.HasPrefix(name, ".") {
			if d.IsDir() {
				return filepath.SkipDir
			}
			return nil
		}
		if d.IsDir() || !d.Type().IsRegular() {
			return nil
		}
		if !matchAny(cfg.Include, name, true) || matchAny(cfg.Exclude, name, false) {
			return nil
		}
		info, err := d.Info()
		if err != nil {
			return fileError(path, err)
		}
		out = append(out, source{Path: path, Size: info.Size(), MTime: info.ModTime().UnixNano()})
		return nil
	})
	if err != nil {
		return nil, err
	}
	if len(out) == 0 {
		if len(cfg.Include) > 0 || len(cfg.Exclude) > 0 {
			return nil, fmt.Errorf("corpus directory %q: no files match data.include %q and data.exclude %q", p, cfg.Include, cfg.Exclude)
		}
		return nil, fmt.Errorf("corpus directory %q: no files", p)
	}
	return out, nil
}

// matchAny reports whether name matches one of pats; empty pats give
// ifEmpty.
func matchAny(pats []string, name string, ifEmpty bool) bool {
	if len(pats) == 0 {
		return ifEmpty
	}
	for _, pat := range pats {
		if ok, _ := filepath.Match(pat, name); ok {
			return true
		}
	}
	return false
}

// fileError turns an os error into a one-line message naming the file.
func fileError(p string, err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		err = pe.Err
	}
	switch {
	case errors.Is(err, fs.ErrNotExist):
		return fmt.Errorf("corpus %q: no such file or directory", p)
	case errors.Is(err, fs.ErrPermission):
		return fmt.Errorf("corpus %q: permission denied", p)
	}
	return fmt.Errorf("corpus %q: %w", p, err)
}
