/*
 * Application side of the firmware example: feed sensor readings to the generated model and
 * report each result. On a real board the readings come from the ADCs; here they are a table
 * (readings.h) so that the run can be compared with the trained model on the host.
 *
 * Output, one line per reading: "<status> <heatsink temperature as the raw Q-format integer>".
 *
 * A fitted model is not a safety function: keep the controller's own limits and interlocks, and
 * follow the functional-safety standards and codes that apply to the product.
 */
#include <stdint.h>

#include "fan.h"
#include "readings.h"

void harness_write(const char *text); /* startup.c: text out through semihosting */

static void write_line(int status, long value)
{
    char text[32];
    char digits[16];
    int n = 0;
    int length = 0;
    unsigned long magnitude = value < 0 ? (unsigned long)(-value) : (unsigned long)value;

    text[length++] = (char)('0' + status);
    text[length++] = ' ';
    if (value < 0) {
        text[length++] = '-';
    }
    do {
        digits[n++] = (char)('0' + (int)(magnitude % 10UL));
        magnitude /= 10UL;
    } while (magnitude != 0UL);
    while (n > 0) {
        text[length++] = digits[--n];
    }
    text[length++] = '\n';
    text[length] = '\0';
    harness_write(text);
}

int main(void)
{
    unsigned int row;

    for (row = 0; row < N_READINGS; ++row) {
        int16_t x[FAN_N_INPUTS];
        int16_t y[FAN_N_OUTPUTS] = {0};
        int status;

        x[0] = FAN_INPUT_FROM_REAL(0, READINGS[row][0]); /* ambient temperature, degC */
        x[1] = FAN_INPUT_FROM_REAL(1, READINGS[row][1]); /* fan speed, rpm */
        x[2] = FAN_INPUT_FROM_REAL(2, READINGS[row][2]); /* load current, A */
        x[3] = FAN_INPUT_FROM_REAL(3, READINGS[row][3]); /* supply voltage, V */
        status = fan_predict(x, y);
        write_line(status, (long)y[0]);
    }
    return 0;
}
