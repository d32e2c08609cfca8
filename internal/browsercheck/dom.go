package browsercheck

import (
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"regexp"
	"strings"
)

// Node is an element or a text node of a parsed HTML document.
type Node struct {
	// Tag is the element's local name in lower case; empty for a text node.
	Tag string
	// Attr holds the element's attributes by name ("xlink:href" for the
	// SVG link attribute, otherwise the local name as written).
	Attr map[string]string
	// Text is a text node's text.
	Text string
	// Children are the child nodes in document order.
	Children []*Node
	// Parent is nil for the root.
	Parent *Node
}

// rawText matches the elements whose content HTML does not parse as
// markup; Parse escapes their content first so that the XML tokenizer
// reads it as text.
var rawText = regexp.MustCompile(`(?is)(<(script|style)\b[^>]*>)(.*?)(</(?:script|style)\s*>)`)

// Parse reads an HTML document as written by voxgamma or serialised by
// Chromium (--dump-dom): every element closed or void, attributes quoted.
// It is a tolerant reader built on encoding/xml in its HTML mode, not a
// full HTML5 parser. The returned root is a synthetic node holding the
// document's top-level nodes.
func Parse(r io.Reader) (*Node, error) {
	b, err := io.ReadAll(r)
	if err != nil {
		return nil, fmt.Errorf("browsercheck: reading HTML: %w", err)
	}
	src := rawText.ReplaceAllStringFunc(string(b), func(m string) string {
		p := rawText.FindStringSubmatch(m)
		esc := strings.NewReplacer("&", "&amp;", "<", "&lt;").Replace(p[3])
		return p[1] + esc + p[4]
	})
	d := xml.NewDecoder(strings.NewReader(src))
	d.Strict = false
	d.AutoClose = append(append([]string(nil), xml.HTMLAutoClose...), "source", "track", "wbr", "embed")
	d.Entity = xml.HTMLEntity
	root := &Node{}
	cur := root
	for {
		tok, err := d.Token()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("browsercheck: parsing HTML: %w", err)
		}
		switch t := tok.(type) {
		case xml.StartElement:
			n := &Node{Tag: strings.ToLower(t.Name.Local), Attr: map[string]string{}, Parent: cur}
			for _, a := range t.Attr {
				n.Attr[attrName(a.Name)] = a.Value
			}
			cur.Children = append(cur.Children, n)
			cur = n
		case xml.EndElement:
			name := strings.ToLower(t.Name.Local)
			for n := cur; n != root; n = n.Parent {
				if n.Tag == name {
					cur = n.Parent
					break
				}
			}
		case xml.CharData:
			cur.Children = append(cur.Children, &Node{Text: string(t), Parent: cur})
		}
	}
	return root, nil
}

func attrName(n xml.Name) string {
	switch {
	case n.Space == "":
		return n.Local
	case n.Space == "xmlns":
		return "xmlns:" + n.Local
	case strings.Contains(n.Space, "xlink"):
		return "xlink:" + n.Local
	}
	return n.Space + ":" + n.Local
}

// All returns the nodes under n (n included) for which keep is true, in
// document order.
func (n *Node) All(keep func(*Node) bool) []*Node {
	var out []*Node
	var walk func(*Node)
	walk = func(m *Node) {
		if keep(m) {
			out = append(out, m)
		}
		for _, c := range m.Children {
			walk(c)
		}
	}
	walk(n)
	return out
}

// Elements returns the elements under n with the given tag.
func (n *Node) Elements(tag string) []*Node {
	tag = strings.ToLower(tag)
	return n.All(func(m *Node) bool { return m.Tag == tag })
}

// ByID returns the element under n with the given id, or nil.
func (n *Node) ByID(id string) *Node {
	found := n.All(func(m *Node) bool { return m.Tag != "" && m.Attr["id"] == id })
	if len(found) == 0 {
		return nil
	}
	return found[0]
}

// HasClass reports whether the element's class attribute lists c.
func (n *Node) HasClass(c string) bool {
	for _, f := range strings.Fields(n.Attr["class"]) {
		if f == c {
			return true
		}
	}
	return false
}

// TextContent returns the concatenated text under n.
func (n *Node) TextContent() string {
	var b strings.Builder
	for _, t := range n.All(func(m *Node) bool { return m.Tag == "" }) {
		b.WriteString(t.Text)
	}
	return b.String()
}

// Hidden reports whether n or an ancestor has the hidden attribute or an
// inline style of display: none.
func (n *Node) Hidden() bool {
	for m := n; m != nil; m = m.Parent {
		if m.Tag == "" {
			continue
		}
		if _, ok := m.Attr["hidden"]; ok {
			return true
		}
		st := strings.ReplaceAll(strings.ToLower(m.Attr["style"]), " ", "")
		if strings.Contains(st, "display:none") {
			return true
		}
	}
	return false
}
