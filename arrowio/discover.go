package arrowio

import (
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
	"time"
)

// KV is one Hive partition segment, key=value.
type KV struct{ Key, Value string }

// File is one discovered Parquet input.
type File struct {
	Rel       string // slash-separated path relative to the dataset root
	Abs       string // absolute path on disk, or the s3:// location
	Partition []KV   // Hive segments in path order
	Size      int64
	ModTime   time.Time
}

// Discover lists every regular *.parquet file under root, sorted by Rel in
// byte order. Files and folders whose names start with '_' or '.' are
// skipped (root itself is never skipped). The suffix is matched case
// sensitively.
//
// On local disk root may itself be a symbolic link to a folder, but links
// below root are not followed: a linked folder is not entered and a linked
// file is not a regular file, so both are ignored. This keeps a walk
// finite and every input inside the tree it was asked to read. On an object
// store, root is a key prefix and every object below it is listed.
//
// Partition is parsed from the folder segments of Rel (see ParsePartition).
// A missing local root, or one that is not a folder, is an error naming
// it; a tree without inputs gives an error wrapping ErrNoInputs.
func Discover(root string) ([]File, error) {
	st, key, err := Locate(root)
	if err != nil {
		return nil, err
	}
	absRoot := root
	if st == Local {
		info, err := os.Stat(key)
		if err != nil {
			return nil, err
		}
		if !info.IsDir() {
			return nil, pathError("discover", root, errors.New("not a directory"))
		}
		if absRoot, err = filepath.Abs(key); err != nil {
			return nil, pathError("discover", root, err)
		}
	}
	objs, err := st.List(background, key)
	if err != nil {
		return nil, err
	}
	var files []File
	for _, o := range objs {
		if !strings.HasSuffix(o.Key, ".parquet") || hiddenSegment(o.Key) {
			continue
		}
		// Segments "." and ".." start with '.' and were skipped as hidden;
		// an empty one ("a//b") would be cleaned into another key.
		if !plainKey(o.Key) {
			return nil, pathError("discover", root, fmt.Errorf("object key %q has an empty segment and cannot be read as a location", o.Key))
		}
		part, err := ParsePartition(o.Key)
		if err != nil {
			var pe *fs.PathError
			if errors.As(err, &pe) {
				err = pe.Err
			}
			return nil, pathError("discover", Join(root, o.Key), err)
		}
		files = append(files, File{
			Rel:       o.Key,
			Abs:       Join(absRoot, o.Key),
			Partition: part,
			Size:      o.Size,
			ModTime:   o.ModTime,
		})
	}
	if len(files) == 0 {
		return nil, pathError("discover", root, ErrNoInputs)
	}
	return files, nil
}

// hiddenSegment reports whether a segment of a slash-separated relative
// path starts with '_' or '.'.
func hiddenSegment(rel string) bool {
	for seg := range strings.SplitSeq(rel, "/") {
		if strings.HasPrefix(seg, "_") || strings.HasPrefix(seg, ".") {
			return true
		}
	}
	return false
}

// ParsePartition parses the Hive key=value segments of a slash-separated
// relative file path. The last segment is the file name and is never a
// partition; a folder segment without '=' is allowed and is not a partition.
// A segment splits at its first '='. Keys and values are unescaped Hive
// style: "%XX" with two hex digits is the byte 0xXX, and a '%' not followed
// by two hex digits stands for itself. An empty key is an error wrapping
// ErrBadPartition and naming rel. The same key may appear at two depths;
// both segments are returned in path order.
func ParsePartition(rel string) ([]KV, error) {
	i := strings.LastIndexByte(rel, '/')
	if i < 0 {
		return nil, nil
	}
	var kvs []KV
	for seg := range strings.SplitSeq(rel[:i], "/") {
		k, v, ok := strings.Cut(seg, "=")
		if !ok {
			continue
		}
		if k == "" {
			return nil, pathError("parse partition", rel, fmt.Errorf("%w: empty key in %q", ErrBadPartition, seg))
		}
		kvs = append(kvs, KV{Key: unescapePartition(k), Value: unescapePartition(v)})
	}
	return kvs, nil
}

// FormatPartition renders kvs as folder segments "k1=v1/k2=v2", escaping
// each key and value so that ParsePartition of the result followed by a
// file name gives kvs back (for keys that are not empty).
func FormatPartition(kvs []KV) string {
	var b strings.Builder
	for i, kv := range kvs {
		if i > 0 {
			b.WriteByte('/')
		}
		b.WriteString(escapePartition(kv.Key))
		b.WriteByte('=')
		b.WriteString(escapePartition(kv.Value))
	}
	return b.String()
}

// String renders kv as one escaped folder segment, key=value.
func (kv KV) String() string { return FormatPartition([]KV{kv}) }

// needsEscape reports whether c is escaped in a partition segment. The set
// is that of Apache Hive's FileUtils.escapePathName (from memory): control
// characters, DEL and "#%'*/:=?\{[]^, which covers every byte that would
// change how a path splits into segments or into key and value.
func needsEscape(c byte) bool {
	if c < 0x20 || c == 0x7f {
		return true
	}
	return strings.IndexByte("\"#%'*/:=?\\{[]^", c) >= 0
}

func escapePartition(s string) string {
	const hex = "0123456789ABCDEF"
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		c := s[i]
		if needsEscape(c) {
			b.WriteByte('%')
			b.WriteByte(hex[c>>4])
			b.WriteByte(hex[c&0xf])
			continue
		}
		b.WriteByte(c)
	}
	return b.String()
}

func unescapePartition(s string) string {
	if !strings.Contains(s, "%") {
		return s
	}
	b := make([]byte, 0, len(s))
	for i := 0; i < len(s); i++ {
		if s[i] == '%' && i+2 < len(s) && isHex(s[i+1]) && isHex(s[i+2]) {
			b = append(b, unhex(s[i+1])<<4|unhex(s[i+2]))
			i += 2
			continue
		}
		b = append(b, s[i])
	}
	return string(b)
}

func isHex(c byte) bool {
	return '0' <= c && c <= '9' || 'a' <= c && c <= 'f' || 'A' <= c && c <= 'F'
}

func unhex(c byte) byte {
	switch {
	case c >= 'a':
		return c - 'a' + 10
	case c >= 'A':
		return c - 'A' + 10
	}
	return c - '0'
}
