package measure

import (
	"fmt"
	"testing"
)

// TestNameTableAsMap checks the name table against a Go map over names
// added one by one, past several doublings (the table starts with room for
// 4 names), with names repeated and names that differ in one byte.
func TestNameTableAsMap(t *testing.T) {
	tab := newNameTable(4)
	var names []string
	want := map[string]int32{}
	add := func(name string) {
		id, slot, ok := tab.find(names, name)
		if _, in := want[name]; in != ok {
			t.Fatalf("find(%q) found=%v, map has it=%v", name, ok, in)
		}
		if ok {
			if id != want[name] {
				t.Fatalf("find(%q) = %d, want %d", name, id, want[name])
			}
			return
		}
		want[name] = int32(len(names))
		tab.slots[slot] = int32(len(names))
		names = append(names, name)
		tab.grow(names)
	}
	for i := range 5000 {
		add(fmt.Sprintf("n%d", i%3000))
		add(fmt.Sprintf("n%d/", i))
	}
	if len(names) != len(want) {
		t.Fatalf("%d names numbered, map has %d", len(names), len(want))
	}
	for name, id := range want {
		if got, _, ok := tab.find(names, name); !ok || got != id {
			t.Errorf("find(%q) = %d, %v; want %d", name, got, ok, id)
		}
	}
	if _, _, ok := tab.find(names, "absent"); ok {
		t.Error(`find("absent") found a name never added`)
	}
	if 3*len(names) >= 2*len(tab.slots) {
		t.Errorf("%d names in %d slots: more than two thirds full", len(names), len(tab.slots))
	}
}
