package serialline_test

import (
	"context"
	"fmt"
	"time"

	"github.com/creack/pty"

	"kermalux/drivers/serialline"
)

// A meter on a serial line, played here by the far side of a
// pseudo-terminal: the port writes a command with the line end the meter
// expects and returns each reply line stamped on arrival, its line end
// taken off (CR LF on receive also accepts a bare LF).
func ExampleOpen() {
	meter, dev, err := pty.Open()
	if err != nil {
		fmt.Println(err)
		return
	}
	defer meter.Close()
	defer dev.Close()
	ctx := context.Background()
	port, err := serialline.Open(ctx, serialline.Config{Port: dev.Name(), Baud: 9600,
		SendEnd: serialline.CRLF, ReceiveEnd: serialline.CRLF, ReadTimeout: 2 * time.Second}, serialline.Options{})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer port.Close()
	if err := port.WriteLine(ctx, "RD?"); err != nil {
		fmt.Println(err)
		return
	}
	buf := make([]byte, 16)
	n, _ := meter.Read(buf)
	fmt.Printf("the meter got %q\n", buf[:n])
	meter.Write([]byte("RD 1.2345E-01 uGy/s OK\r\n"))
	line, err := port.ReadLine(ctx)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("the port read %q\n", line.Text)
	// Output:
	// the meter got "RD?\r\n"
	// the port read "RD 1.2345E-01 uGy/s OK"
}
