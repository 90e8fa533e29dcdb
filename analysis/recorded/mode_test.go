package recorded

import (
	"strings"
	"testing"
)

// A table whose units carry modes is in one mode: gauge and absolute rows
// together are refused with both lines named; units without a mode go
// with either.
func TestModesInATable(t *testing.T) {
	head := "cycle,direction,nominal,reference,dut,unit\n"
	mixed := head + "1,up,0,0,0.1,psig\n1,up,100,100.2,100.3,psig\n1,up,200,214.9,215.1,psia\n"
	_, err := Read(strings.NewReader(mixed))
	if err == nil || !strings.Contains(err.Error(), `line 4, column F (unit): "psia" is absolute pressure but line 2 has "psig" (gauge): a table is in one mode`) {
		t.Fatalf("mixed modes: %v", err)
	}
	for _, ok := range []string{
		head + "1,up,0,0,0.1,psia\n1,up,100,100.2,100.3,psia\n",
		head + "1,up,0,0,0.1,bar\n1,up,10,10.01,10.02,bar(g)\n1,up,16,16.0,16.01,bar\n",
	} {
		if _, err := Read(strings.NewReader(ok)); err != nil {
			t.Errorf("%q: %v", ok, err)
		}
	}
}
