package sim
import ("testing";"time")
func TestZZPty(t *testing.T){
 p, err := openPTY(); if err!=nil {t.Fatal(err)}
 defer p.Close()
 err = p.master.SetReadDeadline(time.Now().Add(50*time.Millisecond))
 t.Log("deadline err", err)
 b := make([]byte,10)
 n, err := p.master.Read(b)
 t.Log(n, err)
}
