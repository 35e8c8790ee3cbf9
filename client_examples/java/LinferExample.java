// Fit the warehouse demo data with linfer from Java 17: java.net.http only, no libraries.
//
//   javac -d /tmp/linfer-java client_examples/java/LinferExample.java
//   java -cp /tmp/linfer-java LinferExample [path/to/request.json]
//
// (or, without a separate compile step: java client_examples/java/LinferExample.java)
//
// Posts the demo request (client_examples/data/warehouse_energy_table.json unless a
// path is given) to $LINFER_URL/v1/fit (default http://127.0.0.1:8000), prints the
// JSON answer, then the estimate of temp_c picked out of it with a regular expression
// (a real program would use a JSON library). Exits 1 on an error answer.

import java.io.IOException;
import java.net.URI;
import java.net.http.HttpClient;
import java.net.http.HttpRequest;
import java.net.http.HttpResponse;
import java.nio.file.Files;
import java.nio.file.Path;
import java.time.Duration;
import java.util.regex.Matcher;
import java.util.regex.Pattern;

public final class LinferExample {

    private static final String DEFAULT_URL = "http://127.0.0.1:8000";
    private static final String DEFAULT_REQUEST = "client_examples/data/warehouse_energy_table.json";

    // The coefficient object named temp_c, up to its "estimate" member (which comes
    // before the nested intervals, so no brace lies in between).
    private static final Pattern TEMP_C_ESTIMATE = Pattern.compile(
            "\\{\\s*\"name\"\\s*:\\s*\"temp_c\"[^{}]*?\"estimate\"\\s*:\\s*(-?[0-9][0-9.eE+-]*|null)");

    public static void main(String[] args) throws IOException, InterruptedException {
        String baseUrl = System.getenv().getOrDefault("LINFER_URL", DEFAULT_URL).replaceAll("/+$", "");
        Path requestFile = Path.of(args.length > 0 ? args[0] : DEFAULT_REQUEST);
        String body = Files.readString(requestFile);

        HttpClient client = HttpClient.newBuilder()
                .connectTimeout(Duration.ofSeconds(5))
                .build();
        HttpRequest request = HttpRequest.newBuilder(URI.create(baseUrl + "/v1/fit"))
                .timeout(Duration.ofSeconds(30))
                .header("Content-Type", "application/json")
                .header("Accept", "application/json")
                .POST(HttpRequest.BodyPublishers.ofString(body))
                .build();

        HttpResponse<String> response = client.send(request, HttpResponse.BodyHandlers.ofString());
        if (response.statusCode() != 200) {
            // An RFC 9457 problem document: errors[].pointer says where the request is wrong.
            System.err.println("linfer answered " + response.statusCode() + ":");
            System.err.println(response.body());
            System.exit(1);
        }
        System.out.println(response.body());

        Matcher m = TEMP_C_ESTIMATE.matcher(response.body());
        if (m.find()) {
            System.out.println("temp_c estimate: " + m.group(1) + " kWh per degree C");
        } else {
            System.err.println("no temp_c coefficient in the answer");
            System.exit(1);
        }
    }
}
