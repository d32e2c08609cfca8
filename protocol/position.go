package protocol

// Where in the file: the YAML nodes behind each protocol key, so that every
// error names the file, the line and the key path, and the readable forms of
// the YAML decoder's type and syntax errors.

import (
	"errors"
	"fmt"
	"reflect"
	"regexp"
	"strconv"
	"strings"

	"go.yaml.in/yaml/v3"
)

// documentContent returns the top node of a parsed document, nil for an
// empty one.
func documentContent(root *yaml.Node) *yaml.Node {
	if root.Kind == yaml.DocumentNode && len(root.Content) > 0 {
		return root.Content[0]
	}
	return nil
}

// nodeKind names the kind of a YAML node for a message.
func nodeKind(n *yaml.Node) string {
	switch n.Kind {
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		return fmt.Sprintf("the value %q", n.Value)
	case yaml.AliasNode:
		return "an alias"
	}
	return "a mapping"
}

// fieldPath writes a path such as rules[2].op.
func fieldPath(path []any) string {
	var b strings.Builder
	for _, s := range path {
		switch v := s.(type) {
		case int:
			fmt.Fprintf(&b, "[%d]", v)
		case string:
			if v == "" {
				continue
			}
			if b.Len() > 0 {
				b.WriteByte('.')
			}
			b.WriteString(v)
		}
	}
	return b.String()
}

// nodePositions finds lines of fields in a parsed YAML document.
type nodePositions struct{ root *yaml.Node }

// line returns the line of the value at path (mapping keys as strings,
// sequence indices as ints); for a missing field, the line of the deepest
// part of the path that exists.
func (np nodePositions) line(path ...any) int {
	n := np.root
	if n == nil {
		return 0
	}
	if n.Kind == yaml.DocumentNode && len(n.Content) > 0 {
		n = n.Content[0]
	}
	best := n.Line
	for _, s := range path {
		var next *yaml.Node
		switch v := s.(type) {
		case int:
			if n.Kind == yaml.SequenceNode && v >= 0 && v < len(n.Content) {
				next = n.Content[v]
			}
		case string:
			if v == "" {
				continue
			}
			if n.Kind == yaml.MappingNode {
				for j := 0; j+1 < len(n.Content); j += 2 {
					if n.Content[j].Value == v {
						next = n.Content[j+1]
						best = n.Content[j].Line
						break
					}
				}
			}
		}
		if next == nil {
			return best
		}
		n = next
		best = n.Line
	}
	return best
}

// has reports whether the field at path (mapping keys as strings, sequence
// indices as ints) is present in the document.
func (np nodePositions) has(path ...any) bool {
	n := np.root
	if n == nil {
		return false
	}
	if n.Kind == yaml.DocumentNode {
		if len(n.Content) == 0 {
			return false
		}
		n = n.Content[0]
	}
	for _, s := range path {
		var next *yaml.Node
		switch v := s.(type) {
		case int:
			if n.Kind == yaml.SequenceNode && v >= 0 && v < len(n.Content) {
				next = n.Content[v]
			}
		case string:
			if n.Kind == yaml.MappingNode {
				for j := 0; j+1 < len(n.Content); j += 2 {
					if n.Content[j].Value == v {
						next = n.Content[j+1]
						break
					}
				}
			}
		}
		if next == nil {
			return false
		}
		n = next
	}
	// "key:" with no value, or "key: ~", reads as left out.
	return !(n.Kind == yaml.ScalarNode && n.Tag == "!!null")
}

// pathAt returns the path of the deepest field that starts on line.
func pathAt(n *yaml.Node, line int) []any {
	if n == nil {
		return nil
	}
	if n.Kind == yaml.DocumentNode {
		if len(n.Content) == 0 {
			return nil
		}
		return pathAt(n.Content[0], line)
	}
	var best []any
	switch n.Kind {
	case yaml.MappingNode:
		for j := 0; j+1 < len(n.Content); j += 2 {
			k, v := n.Content[j], n.Content[j+1]
			if k.Line == line {
				best = []any{k.Value}
			}
			if sub := pathAt(v, line); sub != nil {
				best = append([]any{k.Value}, sub...)
			}
		}
	case yaml.SequenceNode:
		for j, v := range n.Content {
			if v.Line == line {
				best = []any{j}
			}
			if sub := pathAt(v, line); sub != nil {
				best = append([]any{j}, sub...)
			}
		}
	}
	return best
}

var (
	typeErrorLine = regexp.MustCompile(`^line (\d+): (.*)$`)
	unknownField  = regexp.MustCompile(`^field (\S+) not found in type (\S+)$`)
)

// typeErrors turns the decoder's messages into [*Error]s with the field
// path, and names the fields that are known where one is not.
func typeErrors(file string, root *yaml.Node, te *yaml.TypeError) error {
	var errs []error
	for _, msg := range te.Errors {
		e := &Error{File: file, Err: errors.New(msg)}
		if m := typeErrorLine.FindStringSubmatch(msg); m != nil {
			e.Line, _ = strconv.Atoi(m[1])
			e.Field = fieldPath(pathAt(root, e.Line))
			e.Err = errors.New(m[2])
			if u := unknownField.FindStringSubmatch(m[2]); u != nil {
				e.Err = fmt.Errorf("unknown field %q (known here: %s)", u[1], knownFields(u[2]))
			}
		}
		errs = append(errs, e)
	}
	return errors.Join(errs...)
}

// knownFields lists the YAML keys of the protocol type named typ
// ("protocol.Rule"), from the struct tags.
func knownFields(typ string) string {
	for _, t := range []reflect.Type{
		reflect.TypeFor[Protocol](), reflect.TypeFor[Criteria](),
		reflect.TypeFor[KindRule](), reflect.TypeFor[Rule](), reflect.TypeFor[Coverage](), reflect.TypeFor[Noise](),
	} {
		if t.String() != typ {
			continue
		}
		var keys []string
		for i := range t.NumField() {
			keys = append(keys, strings.Split(t.Field(i).Tag.Get("yaml"), ",")[0])
		}
		return strings.Join(keys, ", ")
	}
	return "see the package documentation"
}

var unquotedOp = regexp.MustCompile(`(?m)^[\s-]*op:\s*>`)

// syntaxError adds a hint to a YAML syntax error when the likely cause is
// an unquoted ">=" (a '>' starts a folded block in YAML).
func syntaxError(err error, data []byte) error {
	if unquotedOp.Match(data) {
		return fmt.Errorf("%w (write the operator in quotes: op: \">=\")", err)
	}
	return err
}
