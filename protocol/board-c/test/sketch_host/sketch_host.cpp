/*
 * sketch_host.cpp -- runs examples/BalanceRig/BalanceRig.ino on this computer (make
 * check-packaging): setup(), then loop() with a `hello` and a `status` frame in the serial
 * input; exits 0 only when both were answered with `ok`. Host test code only.
 */
#include "sketch_host.h"

#include <stdio.h>
#include <string.h>

#include <string>

#include "rb_board.h"

static unsigned long now_us;
static std::string rx, tx;

void pinMode(int, int) {}
void digitalWrite(int, int) {}
int digitalRead(int) { return 0; }
int analogRead(int pin) { return pin == A0 ? 520 : 511; }
void analogWrite(int, int) {}
unsigned long micros(void) { return now_us; }
void delay(unsigned long ms) { now_us += ms * 1000u; }
void noInterrupts(void) {}
void interrupts(void) {}
int digitalPinToInterrupt(int pin) { return pin; }
void attachInterrupt(int, void (*)(void), int) {}

HostSerial Serial;
void HostSerial::begin(unsigned long) {}
int HostSerial::available(void) { return (int)rx.size(); }
int HostSerial::read(void)
{
    int c = (unsigned char)rx[0];
    rx.erase(0, 1);
    return c;
}
int HostSerial::availableForWrite(void) { return 64; }
size_t HostSerial::write(const uint8_t *data, size_t n)
{
    tx.append((const char *)data, n);
    return n;
}
size_t HostSerial::println(const char *text)
{
    tx += text;
    tx += "\r\n";
    return strlen(text) + 2;
}

void setup();
void loop();

static void send(const char *body)
{
    char frame[RB_MAX_LINE + 1];
    size_t n = rb_frame(frame, sizeof frame, body, strlen(body));
    rx.append(frame, n);
}

int main()
{
    int i;
    setup();
    send("hello 1 1.0");
    send("status 2");
    for (i = 0; i < 400; i++) {            /* two seconds of a 200 Hz rig */
        loop();
        now_us += 1000u;
    }
    if (tx.find("@ok 1 proto=1.0 board=sketch-balance-1") == std::string::npos ||
        tx.find("@ok 2 mode=off") == std::string::npos) {
        fprintf(stderr, "the sketch did not answer hello and status:\n%s\n", tx.c_str());
        return 1;
    }
    printf("BalanceRig.ino on the host: hello and status answered (%zu bytes sent)\n", tx.size());
    return 0;
}
