// Command line: calls the stages in a line. (Being written.)
int main() { return 2; }
