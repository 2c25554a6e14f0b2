<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>
<!-- Channel Habitat, compareregimes: speed change (alternative minus base), m/s: own diverging palette, brown = slower, blue = faster; lightness symmetric about a near-white zero so it reads for red-green colour blindness and in grey. compareregimes rescales the ramp to the data (98th percentile of |change|, rounded). -->
<qgis hasScaleBasedVisibilityFlag="0" styleCategories="AllStyleCategories" minScale="1e+08" version="3.22.16-Białowieża" maxScale="0">
  <flags>
    <Identifiable>1</Identifiable>
    <Removable>1</Removable>
    <Searchable>1</Searchable>
    <Private>0</Private>
  </flags>
  <temporal fetchMode="0" mode="0" enabled="0">
    <fixedRange>
      <start></start>
      <end></end>
    </fixedRange>
  </temporal>
  <customproperties>
    <Option type="Map">
      <Option name="identify/format" value="Value" type="QString"/>
    </Option>
  </customproperties>
  <pipe-data-defined-properties>
    <Option type="Map">
      <Option name="name" value="" type="QString"/>
      <Option name="properties"/>
      <Option name="type" value="collection" type="QString"/>
    </Option>
  </pipe-data-defined-properties>
  <pipe>
    <provider>
      <resampling zoomedInResamplingMethod="nearestNeighbour" zoomedOutResamplingMethod="nearestNeighbour" enabled="false" maxOversampling="2"/>
    </provider>
    <rasterrenderer band="1" nodataColor="" opacity="1" alphaBand="-1" type="singlebandpseudocolor" classificationMin="-0.4" classificationMax="0.4">
      <minMaxOrigin>
        <limits>None</limits>
        <extent>WholeRaster</extent>
        <statAccuracy>Estimated</statAccuracy>
        <cumulativeCutLower>0.02</cumulativeCutLower>
        <cumulativeCutUpper>0.98</cumulativeCutUpper>
        <stdDevFactor>2</stdDevFactor>
      </minMaxOrigin>
      <rastershader>
        <colorrampshader clip="0" labelPrecision="6" colorRampType="INTERPOLATED" classificationMode="1" maximumValue="0.40000000000000002" minimumValue="-0.40000000000000002">
          <item alpha="255" label="-0.4 m/s or slower" value="-0.4" color="#6b2f0e"/>
          <item alpha="255" label="-0.3 m/s" value="-0.3" color="#9a4f1e"/>
          <item alpha="255" label="-0.2 m/s" value="-0.2" color="#c98545"/>
          <item alpha="255" label="-0.1 m/s" value="-0.1" color="#ebc393"/>
          <item alpha="255" label="0 m/s (no change)" value="0" color="#f3f1ee"/>
          <item alpha="255" label="+0.1 m/s" value="0.1" color="#b9d7e6"/>
          <item alpha="255" label="+0.2 m/s" value="0.2" color="#74aacb"/>
          <item alpha="255" label="+0.3 m/s" value="0.3" color="#3a74a8"/>
          <item alpha="255" label="+0.4 m/s or faster" value="0.4" color="#173e6e"/>
          <rampLegendSettings suffix="" minimumLabel="" useContinuousLegend="1" maximumLabel="" prefix="" direction="0" orientation="2">
            <numericFormat id="basic">
              <Option type="Map">
                <Option name="decimal_separator" value="" type="QChar"/>
                <Option name="decimals" value="6" type="int"/>
                <Option name="rounding_type" value="0" type="int"/>
                <Option name="show_plus" value="false" type="bool"/>
                <Option name="show_thousand_separator" value="true" type="bool"/>
                <Option name="show_trailing_zeros" value="false" type="bool"/>
                <Option name="thousand_separator" value="" type="QChar"/>
              </Option>
            </numericFormat>
          </rampLegendSettings>
        </colorrampshader>
      </rastershader>
    </rasterrenderer>
    <brightnesscontrast brightness="0" gamma="1" contrast="0"/>
    <huesaturation colorizeOn="0" colorizeRed="255" grayscaleMode="0" colorizeStrength="100" saturation="0" colorizeGreen="128" invertColors="0" colorizeBlue="128"/>
    <rasterresampler maxOversampling="2"/>
    <resamplingStage>resamplingFilter</resamplingStage>
  </pipe>
  <blendMode>0</blendMode>
</qgis>
